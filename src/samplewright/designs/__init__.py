"""Sampling designs: one small class per family, all following :class:`Design`; the registry names them."""

from __future__ import annotations

from samplewright.designs.base import Design
from samplewright.designs.cluster import Cluster
from samplewright.designs.poisson import Bernoulli, Poisson
from samplewright.designs.pps import Pareto, PPSSystematic, PPSWithReplacement, Sampford
from samplewright.designs.registry import DESIGN_CLASSES, size_words
from samplewright.designs.srs import SRS
from samplewright.designs.strat_cluster import StratifiedCluster
from samplewright.designs.stratified import Stratified
from samplewright.designs.systematic import Systematic

__all__ = [
    "DESIGN_CLASSES", "SRS", "Bernoulli", "Cluster", "Design", "PPSSystematic",
    "PPSWithReplacement", "Pareto", "Poisson", "Sampford", "Stratified", "StratifiedCluster", "Systematic",
    "size_words",
]
