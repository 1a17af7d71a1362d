"""The design protocol shared by every selection rule.

A design stores its parameters unchanged (so its ``repr`` is exact), checks them against a
frame once (`check`), and draws whole blocks of replicates (`draw`, which calls the one
hook `_draw` each family implements).  Inclusion probabilities and the expected sample
size are part of the protocol, so shared tests can hold every design to them.
"""

from __future__ import annotations

import copy
import json
from typing import ClassVar

import numpy as np

from samplewright.config.validate import closest
from samplewright.designs.block import SampleBlock
from samplewright.errors import InputError, show
from samplewright.population.frame import Frame


class Design:
    """Base class: a named, parameterised rule for drawing samples from a frame."""

    method: ClassVar[str] = ""
    #: the parameter a size sweep varies ("n" or "clusters")
    size_key: ClassVar[str] = "n"
    #: scenario keys this design accepts beyond label/method/estimators
    keys: ClassVar[tuple[str, ...]] = ()
    #: variance estimators this design can be asked for (first is the default)
    variances: ClassVar[tuple[str, ...]] = ("psu",)
    #: how the possible samples are counted, for exact mode's refusal of too many
    count_text: ClassVar[str] = "possible samples"

    def __init__(self, label: str, **params):
        self.label = label
        for k, v in params.items():
            setattr(self, k, v)
        self._params = dict(params)

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self._params.items())
        return f"{type(self).__name__}({self.label!r}, {args})"

    @property
    def settings(self) -> dict:
        """The parameters as plain JSON values (run.json, the selection record)."""
        return json.loads(json.dumps(self._params, default=str))

    # ------------------------------------------------------------ size sweeps
    @property
    def size(self):
        return self._params.get(self.size_key)

    def sizes(self) -> list[int]:
        s = self.size
        return list(s) if isinstance(s, (list, tuple)) else [s]

    def at(self, size: int) -> Design:
        """A copy of this design with a single size (one point of a sweep)."""
        return self.with_params(**{self.size_key: int(size)})

    def with_params(self, **params) -> Design:
        """A copy of this design with some parameters changed.

        Other attributes set after construction (a non-response adjustment, say) are kept; a
        per-frame memo in ``_cache`` starts afresh.
        """
        d = copy.copy(self)
        d._params = {**self._params, **params}
        for k, v in params.items():
            setattr(d, k, v)
        if "_cache" in vars(d):
            d._cache = {}
        return d

    # --------------------------------------------------------------- protocol
    def check(self, frame: Frame) -> None:
        """Refuse (InputError) parameters this frame cannot support; called once per size."""

    def draw(self, frame: Frame, rng: np.random.Generator, B: int, keep_units: bool = False) -> SampleBlock:
        """Draw ``B`` replicate samples as one :class:`SampleBlock` (viewed with the first listed variance
        formula, and able to be viewed with every other: :meth:`SampleBlock.with_variance`)."""
        return self.listed(self._draw(frame, rng, int(B), keep_units))

    def listed(self, block: SampleBlock) -> SampleBlock:
        """``block`` (drawn or enumerated) able to be viewed with every variance formula listed; a design
        whose formulas need fields of their own sets ``block.variants`` when it builds the block."""
        names = self.variance_names
        if block.variants is None and len(names) > 1:
            return block.replaced(variants={name: {} for name in names})
        return block

    def _draw(self, frame, rng, B, keep_units) -> SampleBlock:  # pragma: no cover - abstract
        raise NotImplementedError

    def inclusion_probabilities(self, frame: Frame) -> np.ndarray:  # pragma: no cover - abstract
        """First-order inclusion probability of every unit, shape (N,)."""
        raise NotImplementedError

    def expected_n(self, frame: Frame) -> float:
        """Expected number of sampled units (sum of inclusion probabilities)."""
        return float(self.inclusion_probabilities(frame).sum())

    def strata_frame(self, frame: Frame) -> Frame:
        """The frame with the strata this design selects within (its own stratum column unless the
        design cuts strata of its own, see ``Stratified``)."""
        return frame

    def stratum_allocation(self, frame: Frame):
        """Units allocated per stratum as (population_units, sample_units) arrays, or None."""
        return

    def notes(self, frame: Frame) -> list[str]:
        """Plain sentences about how the design was set up (e.g. certainty units); run.json notes."""
        return []

    # ------------------------------------------------------------ exact mode
    def count_samples(self, frame: Frame) -> int:
        """Number of possible samples (with positive probability); see :mod:`samplewright.evaluation.exact`."""
        raise InputError(f"design {self.label!r}: exact mode is not available for method {self.method!r}")

    def count_formula(self, frame: Frame) -> str:
        """How :meth:`count_samples` counts, for the message that refuses too many samples."""
        return self.count_text

    def enumerate(self, frame: Frame, chunk: int = 20_000):
        """Yield ``(SampleBlock, probabilities)`` over every possible sample, in chunks."""
        raise InputError(f"design {self.label!r}: exact mode is not available for method {self.method!r}")

    @property
    def variance_names(self) -> tuple[str, ...]:
        """Every variance formula the design is scored with: its ``variance`` key (a name or a list of
        names, checked by :meth:`_check_variance`), else the method's default."""
        v = self._params.get("variance")
        if v is None:
            return self.variances[:1]
        return (v,) if isinstance(v, str) else tuple(v)

    @property
    def variance_name(self) -> str:
        """The default variance formula: the first listed (``draw`` and anything needing one formula use it)."""
        return self.variance_names[0]

    # ---------------------------------------------------------------- helpers
    def _check_variance(self) -> None:
        """Refuse a ``variance`` that is not a name, or a non-empty list of distinct names, of this method."""
        v = self._params.get("variance")
        if v is None:
            return
        names = [v] if isinstance(v, str) else v
        where = f"design {self.label!r} ({self.method}): variance = {show(v)}"
        if not isinstance(names, (list, tuple)) or not names or not all(isinstance(x, str) for x in names):
            raise InputError(f"{where}: write one formula name or a non-empty list of names, "
                             f"e.g. {show(list(self.variances[:2]))}")
        if len(set(names)) < len(names):
            raise InputError(f"{where}: names a formula twice; list each once")
        for x in names:
            if x not in self.variances:
                what = where if isinstance(v, str) else f"{where}: {show(x)}"
                raise InputError(f"{what} is not available for this method{closest(x, self.variances)}")

    def _need(self, frame: Frame, role: str) -> None:
        present = {"cluster": frame.cluster is not None, "size": frame.size is not None}[role]
        if not present:
            raise InputError(f"design {self.label!r} ({self.method}) needs a {role} column: "
                             f"set {role} = \"column\" in [frame]")

    def _check_second_stage(self, frame: Frame) -> None:
        """Refuse a ``units_per_cluster`` above the smallest cluster unless ``cap_units`` is set."""
        if self.units_per_cluster is None:
            return
        k = self._positive_int("units_per_cluster", self.units_per_cluster)
        smallest = int(frame.cluster_sizes.min())
        if k > smallest and not self.cap_units:
            raise InputError(f"design {self.label!r}: units_per_cluster = {k} is larger than the smallest "
                             f"cluster ({smallest} units); set cap_units = true to take such clusters whole")

    def _positive_int(self, key: str, value) -> int:
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value <= 0:
            raise InputError(f"design {self.label!r}: {key} must be a whole number above 0, got {value!r}")
        return int(value)
