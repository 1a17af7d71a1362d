"""samplewright: rehearse competing sampling designs on a population frame and score them.

The public surface (see ``__all__``)::

    import samplewright as sw
    sc = sw.load_scenario("scenario.toml")            # or sw.scenario_from_dict({...})
    res = sw.run(sc, replicates=2000, seed=7, jobs=2)  # a RunResult
    res.summary, res.replicates, res.allocation, res.frontier, res.recommendation
    fig = res.figure("coverage")                       # a matplotlib Figure
    res.write("results", report=True)                  # tables, figures/, report.html, brief.md
    back = sw.read_run("results")                      # a finished run folder, read back
    sample = sw.draw(sc, "design label", seed=11)        # the real sample; its record in sample.attrs

Heavier modules are imported on first use, so ``import samplewright`` stays light.
"""

from __future__ import annotations

import logging

from samplewright._version import __version__
from samplewright.errors import InputError

# the package logs its steps, notes and warnings on the "samplewright" logger; silent unless a
# handler is installed (the command line installs one)
logging.getLogger("samplewright").addHandler(logging.NullHandler())

__all__ = [
    "Frame",
    "InputError",
    "RunResult",
    "Scenario",
    "__version__",
    "draw",
    "load_scenario",
    "propose",
    "read_run",
    "run",
    "scenario_from_dict",
    "write_report",
]

_LAZY = {
    "Frame": ("population.frame", "Frame"),
    "run": ("api", "run"),
    "draw": ("api", "draw"),
    "propose": ("api", "propose"),
    "load_scenario": ("simulation.scenario", "load_scenario"),
    "scenario_from_dict": ("simulation.scenario", "scenario_from_dict"),
    "Scenario": ("simulation.scenario", "Scenario"),
    "RunResult": ("results.result", "RunResult"),
    "read_run": ("results.load", "read_run"),
    "write_report": ("report", "write_report"),
}


def __getattr__(name):  # PEP 562: import the public API on first use (no import cycles)
    if name in _LAZY:
        import importlib

        mod, attr = _LAZY[name]
        value = getattr(importlib.import_module(f".{mod}", __name__), attr)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'samplewright' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(__all__))
