"""The design methods a scenario may name, and the class that draws each one.

To add a design: write its class on the :class:`~samplewright.designs.base.Design` protocol in a
module of this package and name it in :data:`DESIGN_CLASSES`.
"""

from __future__ import annotations

import math

from samplewright.config.methods import METHOD_KEYS
from samplewright.designs.base import Design
from samplewright.designs.cluster import Cluster
from samplewright.designs.poisson import Bernoulli, Poisson
from samplewright.designs.pps import Pareto, PPSSystematic, PPSWithReplacement, Sampford
from samplewright.designs.srs import SRS
from samplewright.designs.strat_cluster import StratifiedCluster
from samplewright.designs.stratified import Stratified
from samplewright.designs.systematic import Systematic

#: method name (as written in a scenario) -> design class
DESIGN_CLASSES: dict[str, type[Design]] = {cls.method: cls for cls in (
    SRS, Stratified, Systematic, Cluster, PPSWithReplacement, PPSSystematic, Sampford, Pareto, Poisson, Bernoulli,
    StratifiedCluster)}
if set(DESIGN_CLASSES) != set(METHOD_KEYS):  # every method here has its scenario keys in config/methods.py
    raise RuntimeError(f"design methods {sorted(set(DESIGN_CLASSES) ^ set(METHOD_KEYS))} lack a class or key table")


def size_words(method: str, size, mean_n=None, units: str = "{} units") -> str:
    """How a design's size is said: "6 clusters" for methods whose size counts clusters, with
    the expected number of units beside it when ``mean_n`` is known; else ``units`` with the size."""
    cls = DESIGN_CLASSES.get(method)
    if cls is None or cls.size_key != "clusters":
        return units.format(int(size))
    text = f"{int(size)} clusters"
    if mean_n is not None and not math.isnan(mean_n):
        text += f" (about {float(mean_n):.4g} units expected)"
    return text
