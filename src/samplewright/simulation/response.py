"""Response models: which selected units answer at fieldwork.

A scenario's ``[response]`` table names one model.  Each gives every listed unit a
response propensity; in every replicate each selected, eligible unit then responds by an
independent Bernoulli draw with that propensity.

``constant``
    the same rate for every unit (missing completely at random, MCAR).
``stratum``
    a rate per stratum label (missing at random given the strata).
``cluster``
    a rate per cluster drawn from Beta(a, b) (clustered non-response: whole villages,
    buildings or branches that answer well or badly).  Give ``cluster_mean`` and
    ``cluster_concentration`` (a = mean x concentration, b = (1 - mean) x concentration)
    or ``a`` and ``b``; or a ``[response.cluster_means]`` table of stratum label = mean
    with ``cluster_concentration`` (the Beta mean then depends on the cluster's stratum).
``logistic``
    logit p = intercept + sum_j coefficient_j x_j over frame columns; a column may be the
    target itself, which makes the non-response non-ignorable (no weighting on other
    columns can remove its bias).

Cluster rates are drawn once for the population (``cluster_draw = "frame"``, the
default) from a Generator seeded by the run's seed: a village that is hard to reach is
hard to reach in every sample, so the realistic model holds the propensities fixed and
lets only the Bernoulli outcomes vary between replicates (the fixed-propensity response
model of Sarndal, Swensson & Wretman 1992, ch. 15).  ``cluster_draw = "replicate"``
draws new rates for every replicate; averaged over replicates that makes each unit's
response probability the Beta mean, so it shows the variance that clustering adds but
never a bias specific to this population.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass, field

import numpy as np

from samplewright.config.validate import as_float, as_str, check_keys, closest
from samplewright.errors import InputError

MODELS = ("constant", "stratum", "cluster", "logistic")
KEYS = ("model", "rate", "rates", "cluster_mean", "cluster_means", "cluster_concentration", "a", "b",
        "cluster_draw", "intercept", "coefficients")
#: spawn-key word of the Generator that draws population-level response rates
POPULATION_KEY = zlib.crc32(b"response-population")
#: spawn-key word appended to a block's key for its Bernoulli response draws
BLOCK_KEY = zlib.crc32(b"response-draws")


@dataclass(frozen=True)
class ResponseModel:
    """A validated ``[response]`` table (see module notes)."""

    model: str = "constant"
    rate: float = 1.0
    rates: dict = field(default_factory=dict)  # stratum label (text) -> rate
    a: float = 1.0
    b: float = 1.0
    cluster_means: dict = field(default_factory=dict)  # stratum label (text) -> Beta mean
    concentration: float = 0.0
    cluster_draw: str = "frame"
    intercept: float = 0.0
    coefficients: dict = field(default_factory=dict)  # column -> coefficient

    def columns(self) -> tuple[str, ...]:
        """Frame columns the model reads (beyond the stratum and cluster roles)."""
        return tuple(self.coefficients) if self.model == "logistic" else ()

    def describe(self) -> dict:
        out = {"model": self.model}
        if self.model == "constant":
            out["rate"] = self.rate
        elif self.model == "stratum":
            out["rates"] = dict(self.rates)
        elif self.model == "cluster" and self.cluster_means:
            out.update(cluster_means=dict(self.cluster_means), cluster_concentration=self.concentration,
                       cluster_draw=self.cluster_draw)
        elif self.model == "cluster":
            out.update(a=self.a, b=self.b, mean=self.a / (self.a + self.b), cluster_draw=self.cluster_draw)
        else:
            out.update(intercept=self.intercept, coefficients=dict(self.coefficients))
        return out


def response_from_dict(table: dict, ctx: str = "[response]") -> ResponseModel:
    """Check a ``[response]`` table and build the model; refusals name the key at fault."""
    check_keys(table, KEYS, ctx)
    model = as_str(table.get("model", "constant"), "model", ctx)
    if model not in MODELS:
        raise InputError(f"{ctx}: model {model!r} is not known{closest(model, MODELS)}")
    allowed = {"constant": ("rate",), "stratum": ("rates",),
               "cluster": ("cluster_mean", "cluster_means", "cluster_concentration", "a", "b", "cluster_draw"),
               "logistic": ("intercept", "coefficients")}[model]
    for k in table:
        if k != "model" and k not in allowed:
            raise InputError(f"{ctx}: key {k!r} does not apply to model = {model!r} "
                             f"(it takes: {', '.join(allowed)})")
    if model == "constant":
        if "rate" not in table:
            raise InputError(f"{ctx}: model = 'constant' needs rate = a number in (0, 1]")
        return ResponseModel(model, rate=_rate(table["rate"], "rate", ctx))
    if model == "stratum":
        rates = table.get("rates")
        if not isinstance(rates, dict) or not rates:
            raise InputError(f"{ctx}: model = 'stratum' needs a [response.rates] table of stratum label = rate")
        return ResponseModel(model, rates={str(k): _rate(v, f"rates.{k}", ctx) for k, v in rates.items()})
    if model == "cluster" and "cluster_means" in table:
        means = table["cluster_means"]
        if not isinstance(means, dict) or not means:
            raise InputError(f"{ctx}: cluster_means must be a table of stratum label = mean rate")
        for k in ("cluster_mean", "a", "b"):
            if k in table:
                raise InputError(f"{ctx}: give cluster_means or {k}, not both")
        if "cluster_concentration" not in table:
            raise InputError(f"{ctx}: cluster_means needs cluster_concentration (a + b of each Beta)")
        conc = as_float(table["cluster_concentration"], "cluster_concentration", ctx, minimum=1e-9)
        means = {str(k): as_float(v, f"cluster_means.{k}", ctx, 0.0, 1.0, open_interval=True)
                 for k, v in means.items()}
        return ResponseModel(model, cluster_means=means, concentration=conc,
                             cluster_draw=_cluster_draw(table, ctx))
    if model == "cluster":
        by_mean = "cluster_mean" in table or "cluster_concentration" in table
        by_ab = "a" in table or "b" in table
        if by_mean == by_ab:
            raise InputError(f"{ctx}: model = 'cluster' needs either cluster_mean and cluster_concentration "
                             f"or a and b (exactly one pair)")
        if by_mean:
            for k in ("cluster_mean", "cluster_concentration"):
                if k not in table:
                    raise InputError(f"{ctx}: missing {k!r} (give cluster_mean and cluster_concentration)")
            mean = as_float(table["cluster_mean"], "cluster_mean", ctx, 0.0, 1.0, open_interval=True)
            conc = as_float(table["cluster_concentration"], "cluster_concentration", ctx, minimum=1e-9)
            if conc <= 0:
                raise InputError(f"{ctx}: cluster_concentration must be above 0, got {conc}")
            a, b = mean * conc, (1.0 - mean) * conc
        else:
            for k in ("a", "b"):
                if k not in table:
                    raise InputError(f"{ctx}: missing {k!r} (give both a and b of the Beta distribution)")
            a, b = (as_float(table[k], k, ctx, minimum=1e-9) for k in ("a", "b"))
        return ResponseModel(model, a=a, b=b, cluster_draw=_cluster_draw(table, ctx))
    coefs = table.get("coefficients", {})
    if not isinstance(coefs, dict):
        raise InputError(f"{ctx}: coefficients must be a table of column = coefficient")
    return ResponseModel(model, intercept=as_float(table.get("intercept", 0.0), "intercept", ctx),
                         coefficients={str(k): as_float(v, f"coefficients.{k}", ctx) for k, v in coefs.items()})


def _cluster_draw(table: dict, ctx: str) -> str:
    """``cluster_draw``: the cluster rates drawn once for the population or anew in each replicate."""
    draw = as_str(table.get("cluster_draw", "frame"), "cluster_draw", ctx)
    if draw not in ("frame", "replicate"):
        raise InputError(f"{ctx}: cluster_draw = {draw!r} is not accepted"
                         f"{closest(draw, ('frame', 'replicate'))}")
    return draw


def _rate(value, key, ctx) -> float:
    v = as_float(value, key, ctx, minimum=0.0, maximum=1.0)
    if v <= 0.0:
        raise InputError(f"{ctx}: {key} must be above 0 (a unit that never responds cannot be weighted), "
                         f"got {value!r}")
    return v


# ------------------------------------------------------------------ propensities
@dataclass(frozen=True, eq=False)
class Propensity:
    """A response model resolved over a frame's units.

    ``unit`` holds every listed unit's response probability; for clusters redrawn per
    replicate it is None and ``cluster`` (codes) with ``a``, ``b`` are used instead.
    """

    unit: np.ndarray | None
    cluster: np.ndarray | None = None
    a: object = 1.0  # a number, or one per cluster code
    b: object = 1.0

    def respond(self, rng: np.random.Generator, units: np.ndarray) -> np.ndarray:
        """Bernoulli response of every unit position in ``units`` (any shape, B first), bool array.

        Examples
        --------
        >>> p = Propensity(unit=np.array([0.0, 1.0]))
        >>> p.respond(np.random.default_rng(1), np.array([[0, 1, 1]])).tolist()
        [[False, True, True]]
        """
        u = rng.random(units.shape)
        if self.unit is not None:
            return u < self.unit[units]
        B = units.shape[0]
        C = int(self.cluster.max()) + 1
        key = np.arange(B, dtype=np.int64).reshape((B,) + (1,) * (units.ndim - 1)) * C + self.cluster[units]
        uniq, inv = np.unique(key, return_inverse=True)
        code = uniq % C
        a = self.a[code] if np.ndim(self.a) else self.a
        b = self.b[code] if np.ndim(self.b) else self.b
        rates = rng.beta(a, b, uniq.size)
        return u < rates[inv.reshape(units.shape)]


def resolve(model: ResponseModel, frame, columns: dict, seed: int) -> Propensity:
    """Propensities of every unit of ``frame`` (the true population) under ``model``.

    ``columns`` maps the names the logistic model uses to arrays over the frame's units;
    ``seed`` is the run's seed (population-level cluster rates are drawn from it).
    """
    if model.model == "constant":
        return Propensity(np.full(frame.N, model.rate))
    if model.model == "stratum":
        return Propensity(_stratum_values(model.rates, frame, "rates")[frame.stratum])
    if model.model == "cluster":
        if frame.cluster is None:
            raise InputError("[response] model = 'cluster' needs a cluster column: set cluster = \"column\" "
                             "in [frame]")
        a, b = model.a, model.b
        if model.cluster_means:
            mean = _stratum_values(model.cluster_means, frame, "cluster_means")[frame.cluster_stratum]
            a, b = mean * model.concentration, (1.0 - mean) * model.concentration
        if model.cluster_draw == "replicate":
            return Propensity(None, cluster=frame.cluster, a=a, b=b)
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(POPULATION_KEY,)))
        return Propensity(rng.beta(a, b, frame.C)[frame.cluster])
    eta = np.full(frame.N, model.intercept)
    for col, beta in model.coefficients.items():
        eta = eta + beta * columns[col]
    return Propensity(1.0 / (1.0 + np.exp(-eta)))


def _stratum_values(table: dict, frame, key: str) -> np.ndarray:
    """One value per stratum of the frame from a table keyed by stratum label, shape (H,)."""
    labels = [str(x) for x in frame.stratum_labels]
    missing = [lab for lab in labels if lab not in table]
    extra = [lab for lab in table if lab not in labels]
    if extra:
        raise InputError(f"[response] {key}: stratum {extra[0]!r} is not in the frame{_near(extra[0], labels)}")
    if missing:
        raise InputError(f"[response] {key}: no value for stratum {missing[0]!r} "
                         f"(give one for each of: {', '.join(labels)})")
    return np.array([table[lab] for lab in labels])


def _near(word, options) -> str:
    return closest(word, options)


def block_seed(seedseq: np.random.SeedSequence) -> np.random.SeedSequence:
    """The SeedSequence of a block's response draws: the block's key with one word appended.

    The design's own draws use the block's SeedSequence unchanged, so a replicate selects
    the same units with and without non-response.
    """
    return np.random.SeedSequence(seedseq.entropy, spawn_key=tuple(seedseq.spawn_key) + (BLOCK_KEY,))
