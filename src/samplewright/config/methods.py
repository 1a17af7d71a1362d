"""The scenario keys of each design method, in one place: the scenario checks them, the designs read them."""

from __future__ import annotations

#: method name (as written in a scenario) -> the keys of its ``[[design]]`` table beside the common ones
METHOD_KEYS: dict[str, tuple[str, ...]] = {
    "srs": ("n", "replace"),
    "stratified": ("n", "allocation", "allocation_variable", "stratify_by", "boundaries", "take_all"),
    "systematic": ("n", "kind", "starts", "sort_by", "variance"),
    "cluster": ("clusters", "units_per_cluster", "cap_units", "variance"),
    "stratified_cluster": ("clusters", "cluster_allocation", "units_per_cluster", "cap_units", "selection",
                           "cluster_size", "variance"),
    "pps": ("n", "replace", "variance"),
    "pps_systematic": ("n", "variance"),
    "sampford": ("n", "variance"),
    "pareto": ("n", "variance"),
    "poisson": ("n", "variance"),
    "bernoulli": ("n", "variance"),
}
#: methods whose size counts clusters (the others count units, key ``n``)
CLUSTER_SIZED = ("cluster", "stratified_cluster")
#: former method names, refused with what to write instead
RENAMED_METHODS = {"pps_wr": 'method = "pps" with replace = true'}


def size_key(method: str) -> str:
    """The key giving a method's sample size."""
    return "clusters" if method in CLUSTER_SIZED else "n"
