"""Sampling designs: one small class per family, all following :class:`Design`; the registry names them.

The public names load on first use (PEP 562), so a module that needs only the allocation arithmetic
(``samplewright plan``) does not import every design and, through them, pandas: a deliberate lazy import
for start-up time.
"""

from __future__ import annotations

import importlib

#: public name -> module under samplewright.designs that defines it
_HOMES = {
    "Design": "base", "Cluster": "cluster", "Bernoulli": "poisson", "Poisson": "poisson", "Pareto": "pps",
    "PPSSystematic": "pps", "PPSWithReplacement": "pps", "Sampford": "pps", "DESIGN_CLASSES": "registry",
    "size_words": "registry", "SRS": "srs", "StratifiedCluster": "strat_cluster",
    "Stratified": "stratified", "Systematic": "systematic",
}

__all__ = [
    "DESIGN_CLASSES", "SRS", "Bernoulli", "Cluster", "Design", "PPSSystematic",
    "PPSWithReplacement", "Pareto", "Poisson", "Sampford", "Stratified", "StratifiedCluster", "Systematic",
    "size_words",
]


def __getattr__(name):
    if name not in _HOMES:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{_HOMES[name]}"), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_HOMES))
