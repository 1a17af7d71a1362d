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


#: longest echo of a user's value in a message: a longer one is cut, so an error stays one short line
SHOWN = 60


def show(value) -> str:
    """``repr(value)`` cut to :data:`SHOWN` characters (``...`` marks the cut).

    Only the start of a long list, table or text is looked at, so a 50-million-entry list
    costs no more than a short one.

    Examples
    --------
    >>> show([1] * 50_000_000)
    '[1, 1, 1, 1, 1, 1, 1, 1, ...]'
    >>> len(show("x" * 1000))
    60
    """
    import reprlib

    if type(value).__module__ == "numpy" and getattr(value, "ndim", None) == 0:
        value = value.item()  # a numpy scalar shows as the value a file holds, not as np.int64(7)
    r = reprlib.Repr()  # (keyword arguments to Repr need Python 3.12)
    r.maxlevel, r.maxlist, r.maxtuple, r.maxdict, r.maxset = 3, 8, 8, 4, 4
    r.maxstring = r.maxother = SHOWN
    text = r.repr(value)
    return text if len(text) <= SHOWN else text[:SHOWN - 3] + "..."
