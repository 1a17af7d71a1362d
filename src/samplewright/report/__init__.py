"""The stakeholder report of a run: figures, report.html and brief.md, from the run's tables only.

The report imports nothing from ``results``: it is handed a result (or any object with the same tables).
"""

from __future__ import annotations

__all__ = ["write_report"]


def __getattr__(name: str):
    # lazy, so that the light modules (names, verdict) are read without loading matplotlib and jinja2
    if name == "write_report":
        from samplewright.report.writing import write_report

        return write_report
    raise AttributeError(f"module 'samplewright.report' has no attribute {name!r}")
