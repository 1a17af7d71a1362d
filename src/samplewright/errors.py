"""Exceptions that the command line turns into exit codes.

`InputError` is bad input from the user (exit code 2, one ``error:`` line);
anything else escaping a command is unexpected (exit code 1).
"""

from __future__ import annotations


class InputError(ValueError):
    """User input that samplewright refuses; the message names the culprit."""


class SamplewrightWarning(UserWarning):
    """A condition worth telling the user about that does not stop the run."""


#: the one line printed on Ctrl-C, wherever it lands (start-up, simulation, writing); exit status 130
INTERRUPTED = "error: interrupted; files already written are complete, nothing half-written was kept"
