"""The keys of ``[cost]`` (estimation/cost.py holds the cost model they set)."""

#: the scalar rates of ``[cost]`` (each a number >= 0)
SCALAR_KEYS = ("fixed", "per_unit", "per_cluster", "per_stratum", "per_attempt", "per_complete")
#: every key ``[cost]`` accepts
KEYS = SCALAR_KEYS + ("per_unit_by_stratum", "charge_touched_clusters")
