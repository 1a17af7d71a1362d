"""The scenario's ``[labels]``: what the report, the brief and the terminal call money, units and counts.

::

    [labels]
    currency = "EUR"           # written beside every cost ("4,320 EUR"; a one-character symbol goes
                               # in front: "$4,320")
    unit = "trees"             # what one frame unit is called, plural (default "units")
    cluster = "blocks"         # what one cluster is called, plural (default "clusters")

    [labels.units]
    apples = "apples"          # the unit of each study variable (a target of [frame])

Every value is one line of text of at most :data:`MAX_LABEL` characters; a variable in
``[labels.units]`` must be a target of ``[frame]``.  Labels change words only, never a number.
"""

from __future__ import annotations

from dataclasses import dataclass

from samplewright.config.validate import as_str, check_keys, closest
from samplewright.errors import InputError, show

KEYS = ("currency", "unit", "cluster", "units")
#: longest label accepted (a word or two, not a sentence: it is repeated in every table header)
MAX_LABEL = 40


@dataclass(frozen=True)
class Labels:
    """Words for money, frame units, clusters and each variable's unit (scenario ``[labels]``)."""

    currency: str | None = None
    unit: str = "units"
    cluster: str = "clusters"
    units: tuple[tuple[str, str], ...] = ()  # (variable, unit) pairs

    def as_dict(self) -> dict:
        """The labels as run.json keeps them."""
        return {"currency": self.currency, "unit": self.unit, "cluster": self.cluster,
                "variables": dict(self.units)}


def _text(value, key: str, ctx: str) -> str:
    s = as_str(value, key, ctx)
    if len(s) > MAX_LABEL:
        raise InputError(f"{ctx}: {key} = {show(s)} is {len(s)} characters long; a label may have at most "
                         f"{MAX_LABEL}")
    return s


def labels_spec(table, targets) -> Labels:
    """Check ``[labels]`` against the frame's targets (a name or a list of names)."""
    ctx = "[labels]"
    check_keys(table, KEYS, ctx)
    kw = {k: _text(table[k], k, ctx) for k in ("currency", "unit", "cluster") if k in table}
    if "units" in table:
        uctx = "[labels.units]"
        t = table["units"]
        if not isinstance(t, dict):
            raise InputError(f"{uctx} must be a table of variable = \"unit\", e.g. apples = \"kg\"; got {show(t)}")
        names = [targets] if isinstance(targets, str) else list(targets or [])
        for var in t:
            if names and var not in names:
                raise InputError(f"{uctx}: variable {show(var)} is not a target of [frame]{closest(var, names)}")
        kw["units"] = tuple((str(var), _text(u, str(var), uctx)) for var, u in t.items())
    return Labels(**kw)
