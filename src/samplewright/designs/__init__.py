"""Sampling designs: one small class per family, all following :class:`Design`."""

from __future__ import annotations

from .base import Design
from .cluster import Cluster
from .poisson import Bernoulli, Poisson
from .pps import Pareto, PPSSystematic, PPSWithReplacement, Sampford
from .srs import SRS
from .strat_cluster import StratifiedCluster
from .stratified import Stratified
from .systematic import Systematic

#: method name (as written in a scenario) -> design class
METHODS: dict[str, type[Design]] = {cls.method: cls for cls in (SRS, Stratified, Systematic, Cluster)}
METHODS.update({cls.method: cls for cls in (PPSWithReplacement, PPSSystematic, Sampford, Pareto, Poisson,
                                            Bernoulli, StratifiedCluster)})
#: former method names, refused with what to write instead
RENAMED_METHODS = {"pps_wr": 'method = "pps" with replace = true'}

__all__ = ["Design", "SRS", "Stratified", "Systematic", "Cluster", "METHODS", "RENAMED_METHODS",
           "PPSWithReplacement", "PPSSystematic", "Sampford", "Pareto", "Poisson", "Bernoulli",
           "StratifiedCluster"]
