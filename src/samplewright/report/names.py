"""Plain names for what a person reads: estimators, variance formulas, a design's parameters.

The one place these names live; the figures, tables, sentences and the terminal all read them
from here.  A code with no entry is shown as it is written in the scenario.
"""

from __future__ import annotations

#: estimator code (as written in a scenario) -> its name in a sentence or table
ESTIMATOR_NAMES = {
    "ht": "Horvitz-Thompson",
    "hajek": "Hajek",
    "ratio": "ratio",
    "greg": "generalised regression (GREG)",
    "poststrat": "post-stratified",
}

#: design method (as written in a scenario) -> its name in a sentence
METHOD_NAMES = {
    "srs": "simple random sample",
    "stratified": "stratified sample",
    "systematic": "systematic sample",
    "cluster": "cluster sample",
    "stratified_cluster": "stratified cluster sample",
    "pps": "PPS sample with replacement",
    "pps_systematic": "systematic PPS sample",
    "sampford": "Sampford PPS sample",
    "pareto": "Pareto PPS sample",
    "poisson": "Poisson sample",
    "bernoulli": "Bernoulli sample",
}

#: variance formula code (a design's ``variance`` key) -> its name in a sentence or table
VARIANCE_NAMES = {
    "psu": "the between-PSU formula",
    "hansen_hurwitz": "Hansen-Hurwitz",
    "hartley_rao": "Hartley-Rao",
    "brewer": "Brewer's approximation",
    "sen_yates_grundy": "Sen-Yates-Grundy",
    "poisson": "Poisson sampling",
    "srs": "the simple random sampling formula",
    "successive_differences": "successive differences",
    "between_starts": "between random starts",
    "two_stage": "two-stage (unbiased)",
    "ultimate_cluster": "ultimate cluster",
}


def estimator_name(code) -> str:
    """The plain name of an estimator code.

    Examples
    --------
    >>> estimator_name("ht"), estimator_name("mine")
    ('Horvitz-Thompson', 'mine')
    """
    return ESTIMATOR_NAMES.get(code, str(code))


def method_name(code) -> str:
    """The plain name of a design method."""
    return METHOD_NAMES.get(code, str(code))


def variance_name(code) -> str:
    """The plain name of a variance formula code (empty for none)."""
    if code is None or (isinstance(code, float) and code != code):
        return ""
    return VARIANCE_NAMES.get(code, str(code))


def _value_text(v) -> str:
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, (list, tuple)):
        return ", ".join(_value_text(x) for x in v)
    if isinstance(v, dict):
        return ", ".join(f"{k} {_value_text(x)}" for k, x in v.items())
    if isinstance(v, float) and v == int(v):
        return f"{int(v):,}"
    if isinstance(v, int):
        return f"{v:,}"
    return str(v)


def parameter_text(params) -> str:
    """A design's parameters (a dict of plain values, as run.json keeps them) as text to read.

    Examples
    --------
    >>> parameter_text({"n": [200, 400], "allocation": "neyman", "cap_units": True})
    'n = 200, 400; allocation = neyman; cap_units = yes'
    >>> parameter_text({"n": 400, "variance": ["srs", "successive_differences"]})
    'n = 400; variance = the simple random sampling formula, successive differences'
    """
    if not isinstance(params, dict):  # an older run.json kept a Python repr: not for reading
        return ""
    parts = []
    for k, v in params.items():
        if v is None:
            continue
        if k == "variance":  # one formula or a list of them, each scored on the same draws
            text = ", ".join(variance_name(x) for x in (v if isinstance(v, (list, tuple)) else [v]))
        else:
            text = _value_text(v)
        parts.append(f"{k} = {text}")
    return "; ".join(parts)
