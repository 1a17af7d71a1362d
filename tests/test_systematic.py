"""Systematic designs against exact enumeration of every start and against published closed forms.

For a systematic sample the possible samples are few: one per start.  Here they are listed
with plain Python from the textbook selection rule (every k-th unit from a random start;
Cochran 1977, Sampling Techniques, sec. 8.1), independently of the package, with the
estimate, SE and t-interval each start gives.  The package's simulated moments must agree
with those exact values within a z-bound on their Monte Carlo error (MCSEs as in Morris,
White & Crowther 2019, Table 6).  Frames here are invented, for exercising code only.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z, assert_matches_exact, simulate_design

from samplewright import Frame
from samplewright.designs import Systematic
from samplewright.designs.block import SampleBlock
from samplewright.errors import InputError
from samplewright.estimation.registry import ESTIMATORS
from samplewright.simulation.scenario import scenario_from_dict

horvitz_thompson, hajek = ESTIMATORS["ht"], ESTIMATORS["hajek"]

CONF = 0.95
R = 20_000


def simulated(frame, design, estimator="ht", replicates=R, seed=11):
    return simulate_design(frame, design, estimator, replicates=replicates, seed=seed, confidence=CONF)


def exact_check(reps, samples, truth):
    """samples: (probability, estimate, se, df).  Mean, variance and coverage within Z MCSE."""
    return assert_matches_exact(reps, samples, truth, confidence=CONF, unbiased=True)


def srs_se(ys, N):
    n = len(ys)
    return math.sqrt((1 - n / N) * np.var(ys, ddof=1) / n)  # Cochran 1977, eq. 2.10 form


def v3_se(ys, N):
    """Wolter's v3 for the mean, written out by hand (Wolter, Introduction to Variance
    Estimation, sec. 8.2, from memory): (1 - f) / n * sum (y_i - y_{i-1})^2 / (2 (n - 1))."""
    n = len(ys)
    d = sum((ys[i] - ys[i - 1]) ** 2 for i in range(1, n))
    return math.sqrt((1 - n / N) / n * d / (2 * (n - 1)))


@pytest.fixture
def periodic_frame():
    """24 units with a cycle of period 6 along the list, plus a little trend (invented)."""
    shape = [2.0, 9.0, 14.0, 11.0, 5.0, 1.0]
    y = [shape[i % 6] + 0.15 * i for i in range(24)]
    return Frame.from_dataframe(pd.DataFrame({"y": y}), target="y"), y


# ------------------------------------------------------------------ exact enumeration
@pytest.mark.parametrize("variance", ["srs", "successive_differences"])
def test_integer_interval_matches_enumeration_of_all_starts(periodic_frame, variance):
    """k = 6 = the period: the 6 starts are equally likely; exact bias, variance, coverage."""
    frame, y = periodic_frame
    N, n = 24, 4
    k = N // n
    samples = []
    for s in range(k):
        ys = [y[s + j * k] for j in range(n)]
        se = srs_se(ys, N) if variance == "srs" else v3_se(ys, N)
        samples.append((1 / k, float(np.mean(ys)), se, n - 1))
    reps = simulated(frame, Systematic("every 6th", n=n, variance=variance))
    _, var, cover = exact_check(reps, samples, float(np.mean(y)))
    # the cycle is aliased: the exact variance dwarfs what the SRS formula reports on average
    if variance == "srs":
        assert var > 10 * np.mean([s[2] ** 2 for s in samples])
        assert cover < 0.5


def test_fractional_interval_matches_enumeration(periodic_frame):
    """N = 24, n = 5: k = 4.8.  The sample is constant between the breakpoints u = i - j k of
    floor(u + j k); each piece's probability is its length / k (enumerated at midpoints)."""
    frame, y = periodic_frame
    N, n = 24, 5
    k = N / n
    cuts = sorted({0.0, k} | {c - j * k for j in range(n) for c in range(N + 1) if 0 < c - j * k < k})
    samples, pi = [], np.zeros(N)
    for a, b in zip(cuts[:-1], cuts[1:]):
        u = (a + b) / 2
        units = [math.floor(u + j * k) for j in range(n)]
        ys = [y[i] for i in units]
        samples.append(((b - a) / k, float(np.mean(ys)), srs_se(ys, N), n - 1))
        pi[units] += (b - a) / k
    assert np.allclose(pi, n / N)  # every unit has pi = n / N
    assert np.allclose(Systematic("frac", n=n).inclusion_probabilities(frame), pi)
    exact_check(simulated(frame, Systematic("frac", n=n)), samples, float(np.mean(y)))


def test_circular_matches_enumeration_of_all_n_starts(periodic_frame):
    """Circular systematic: start s uniform on 0..N-1, units (s + floor(j k)) mod N (Lahiri)."""
    frame, y = periodic_frame
    N, n = 24, 5
    samples, pi = [], np.zeros(N)
    for s in range(N):
        units = [(s + (j * N) // n) % N for j in range(n)]
        assert len(set(units)) == n
        ys = [y[i] for i in units]
        samples.append((1 / N, float(np.mean(ys)), srs_se(ys, N), n - 1))
        pi[units] += 1 / N
    assert np.allclose(pi, n / N)
    d = Systematic("circ", n=n, kind="circular")
    assert np.allclose(d.inclusion_probabilities(frame), pi)
    exact_check(simulated(frame, d), samples, float(np.mean(y)))


def test_multiple_starts_match_enumeration_of_start_pairs(periodic_frame):
    """r = 2 independent starts, interval K = r k = 12, m = 2 units each: 144 equal pairs.

    Between-start variance of the mean: sum_s (ybar_s - ybar)^2 / (r (r - 1)) with r - 1 df
    (Wolter, Introduction to Variance Estimation, ch. 2, random groups, from memory)."""
    frame, y = periodic_frame
    n, r = 4, 2  # N = 24
    K, m = 12, 2
    samples = []
    for s1, s2 in itertools.product(range(K), repeat=2):
        means = [np.mean([y[s + j * K] for j in range(m)]) for s in (s1, s2)]
        est = float(np.mean(means))
        se = math.sqrt(sum((a - est) ** 2 for a in means) / (r * (r - 1)))
        samples.append((1 / K**2, est, se, r - 1))
    d = Systematic("two starts", n=n, starts=r, variance="between_starts")
    reps = simulated(frame, d)
    _, var, _ = exact_check(reps, samples, float(np.mean(y)))
    # the random-group estimator is unbiased for independent starts: E[se^2] = Var
    se2 = reps["se"].to_numpy() ** 2
    assert abs(np.mean([s[2] ** 2 for s in samples]) - var) < 1e-9
    assert abs(se2.mean() - var) < Z * se2.std(ddof=1) / math.sqrt(len(se2))


# ------------------------------------------------------------------ inclusion probabilities
def _frequencies(frame, design, B=20_000, seed=5):
    blk = design.draw(frame, np.random.default_rng(seed), B, keep_units=True)
    units = blk.units
    hits = np.zeros(frame.N)
    np.add.at(hits, units.ravel(), 1.0)
    distinct = np.zeros(frame.N)
    for row in units:
        distinct[np.unique(row)] += 1.0
    return hits / B, distinct / B, units


@pytest.mark.parametrize("kw", [{}, {"kind": "circular"}, {"starts": 3}, {"starts": 3, "kind": "circular"}])
def test_inclusion_frequencies_within_binomial_bound(kw):
    N, n, B = 37, 6, 20_000
    frame = Frame.from_dataframe(pd.DataFrame({"y": np.arange(N, dtype=float)}), target="y")
    d = Systematic("s", n=n, **kw)
    d.check(frame)
    hits, distinct, units = _frequencies(frame, d, B)
    assert units.shape == (B, n) and units.min() >= 0 and units.max() < N
    pi = d.inclusion_probabilities(frame)
    r = kw.get("starts", 1)
    # independent starts: each takes unit i with probability 1 / K = n / (r N)
    assert np.allclose(pi, 1 - (1 - n / (r * N)) ** r)
    assert np.all(np.abs(distinct - pi) < Z * np.sqrt(pi * (1 - pi) / B))
    # expected selections per unit n / N (the weight N / n per selection is then unbiased)
    q = n / (r * N)
    assert np.all(np.abs(hits - n / N) < Z * np.sqrt(r * q * (1 - q) / B))
    if r == 1:
        assert all(len(set(row)) == n for row in units[:500])


def test_sort_by_gives_each_group_its_proportional_share():
    """Sorted by a group column, a systematic sample puts floor or ceil of n N_h / N units in
    each group (implicit stratification; Cochran 1977, sec. 8.1)."""
    g = np.array(["c"] * 8 + ["a"] * 10 + ["b"] * 12)
    rng = np.random.default_rng(1)
    g = g[rng.permutation(g.size)]
    df = pd.DataFrame({"y": rng.normal(size=g.size), "grp": g})
    frame = Frame.from_dataframe(df, target="y", sort_keys=["grp"])
    d = Systematic("sorted", n=6, sort_by="grp")
    d.check(frame)
    blk = d.draw(frame, np.random.default_rng(2), 2000, keep_units=True)
    labels = df["grp"].to_numpy()[blk.units]
    for h, N_h in (("a", 10), ("b", 12), ("c", 8)):
        counts = (labels == h).sum(axis=1)
        share = 6 * N_h / 30
        assert set(np.unique(counts)) <= {math.floor(share), math.ceil(share)}
    hits, _, _ = _frequencies(frame, d)
    assert np.all(np.abs(hits - 0.2) < Z * math.sqrt(0.2 * 0.8 / 20_000))


# ------------------------------------------------------------------ closed forms
def test_linear_trend_systematic_beats_srs_cochran():
    """y_i = i, N = n k.  Cochran (1977), sec. 8.8 (from memory; derived again here): the mean of
    the start-s sample is s + k (n - 1) / 2, so V_sys = (k^2 - 1) / 12, while
    V_ran = (1 - f) S^2 / n = (k - 1)(n k + 1) / 12; V_sys / V_ran = (k + 1) / (n k + 1)."""
    n, k = 10, 8
    N = n * k
    frame = Frame.from_dataframe(pd.DataFrame({"y": np.arange(1.0, N + 1)}), target="y")
    v_sys, v_ran = (k * k - 1) / 12, (k - 1) * (n * k + 1) / 12
    assert math.isclose(float(frame.srs_variance_of_mean(n)[0]), v_ran)
    x = simulated(frame, Systematic("trend", n=n))["estimate"].to_numpy()
    # start means are uniform on k equally spaced values: m4 = (3k^2 - 7)(k^2 - 1) / 240
    m4 = (3 * k * k - 7) * (k * k - 1) / 240
    assert abs(x.var(ddof=1) - v_sys) < Z * math.sqrt((m4 - v_sys**2) / len(x))
    assert v_sys < v_ran and math.isclose(v_sys / v_ran, (k + 1) / (n * k + 1))
    from samplewright.designs import SRS

    xs = simulated(frame, SRS("srs", n=n))["estimate"].to_numpy()
    # MCSE of a sample variance, normal approximation for the SRS mean (m4 = 3 V^2)
    assert abs(xs.var(ddof=1) - v_ran) < Z * v_ran * math.sqrt(2 / (len(xs) - 1))
    assert x.var(ddof=1) < xs.var(ddof=1)


def test_random_order_systematic_agrees_with_srs():
    """Over random orderings of a population, the average V_sys equals V_ran (Madow & Madow
    1944; Cochran 1977, sec. 8.5, from memory).  V_sys of each ordering is enumerated over
    its k starts; the package's simulated variance on one ordering matches its own V_sys."""
    n, k = 10, 12
    N = n * k
    base = np.random.default_rng(3).gamma(2.0, 10.0, N)
    S2 = base.var(ddof=1)
    v_ran = (1 - n / N) * S2 / n
    rng = np.random.default_rng(4)
    v = []
    for _ in range(2000):
        y = base[rng.permutation(N)]
        means = y.reshape(n, k).mean(axis=0)  # column s = the start-s sample
        v.append(means.var())  # the k starts are equally likely: divisor k
    v = np.array(v)
    assert abs(v.mean() - v_ran) < Z * v.std(ddof=1) / math.sqrt(len(v))
    frame = Frame.from_dataframe(pd.DataFrame({"y": y}), target="y")
    means = y.reshape(n, k).mean(axis=0)
    v_exact = means.var()
    m4 = np.mean((means - means.mean()) ** 4)
    x = simulated(frame, Systematic("random order", n=n))["estimate"].to_numpy()
    assert abs(x.var(ddof=1) - v_exact) < Z * math.sqrt((m4 - v_exact**2) / len(x))


# ------------------------------------------------------------------ hand-computed estimators
def _block(y, weight, variance, fpc=0.9):
    """One replicate of single units: columns y, count, cost."""
    m = len(y)
    sums = np.column_stack([np.asarray(y, dtype=float), np.ones(m), np.zeros(m)])
    return SampleBlock(sums=sums[None], weight=np.full(m, weight), psu_stratum=np.zeros(m, dtype=np.int64),
                       fpc=np.array([fpc]), clusters=np.zeros(1), variance=variance)


def test_successive_differences_hand_example():
    """Sample 3, 7, 4, 9, 5 in list order from N = 50: differences 4, -3, 5, -4, squares sum 66;
    v3 = (1 - 0.1) / 5 * 66 / (2 * 4) = 1.485 (by hand, Wolter's v3 as written in v3_se)."""
    y = [3.0, 7.0, 4.0, 9.0, 5.0]
    blk = _block(y, 10.0, "successive_differences")
    for est in (horvitz_thompson, hajek):
        out = est(blk, 50, 1, CONF)
        assert math.isclose(float(out.se[0, 0]) ** 2, 1.485, rel_tol=1e-12)
    assert math.isclose(v3_se(y, 50) ** 2, 1.485, rel_tol=1e-12)


def test_successive_differences_through_the_design():
    """A frame of 50 units whose every-10th sample from start 0 is 3, 7, 4, 9, 5."""
    y = np.arange(50, dtype=float) % 7
    y[[0, 10, 20, 30, 40]] = [3, 7, 4, 9, 5]
    frame = Frame.from_dataframe(pd.DataFrame({"y": y}), target="y")
    d = Systematic("sd", n=5, variance="successive_differences")
    blk = d.draw(frame, np.random.default_rng(0), 200, keep_units=True)
    out = horvitz_thompson(blk, 50, 1, CONF)
    row = int(np.flatnonzero(blk.units[:, 0] == 0)[0])
    assert math.isclose(float(out.se[row, 0]) ** 2, 1.485, rel_tol=1e-12)


def test_between_starts_hand_example():
    """Three starts of two units each from N = 60 (n = 6): start sums 10, 14, 6, so start means
    5, 7, 3 and overall 5; v = (0 + 4 + 4) / (3 * 2) = 4/3 (by hand), df = r - 1 = 2."""
    sums = np.array([[10.0, 2.0, 0.0], [14.0, 2.0, 0.0], [6.0, 2.0, 0.0]])
    blk = SampleBlock(sums=sums[None], weight=np.full(3, 10.0), psu_stratum=np.zeros(3, dtype=np.int64),
                      fpc=np.array([1.0]), clusters=np.zeros(1), variance="between_starts")
    for est in (horvitz_thompson, hajek):
        out = est(blk, 60, 1, CONF)
        assert math.isclose(float(out.estimate[0, 0]), 5.0)
        assert math.isclose(float(out.se[0, 0]) ** 2, 4 / 3, rel_tol=1e-12)
        assert float(out.df[0]) == 2.0


# ------------------------------------------------------------------ refusals and scenarios
@pytest.mark.parametrize("kw, words", [
    ({"kind": "circlar"}, "circular"),
    ({"variance": "between_starts"}, "starts = 2 or more"),
    ({"starts": 4}, "not a multiple of starts"),
    ({"variance": "succesive_differences"}, "successive_differences"),
    ({"sort_by": "grp"}, "sort key"),
])
def test_refusals_name_the_key(kw, words):
    frame = Frame.from_dataframe(pd.DataFrame({"y": np.arange(30.0)}), target="y")
    with pytest.raises(InputError, match=words):
        Systematic("bad", n=6, **kw).check(frame)


def test_scenario_sort_by_resolves_the_column_and_refuses_a_missing_one(tmp_path):
    df = pd.DataFrame({"y": np.arange(40.0), "zone": np.tile(["n", "s", "e", "w"], 10)})
    df.to_csv(tmp_path / "f.csv", index=False)
    doc = {"frame": {"path": "f.csv", "target": "y"},
           "design": [{"label": "sorted", "method": "systematic", "n": 8, "sort_by": "zone",
                       "kind": "circular", "variance": "successive_differences"}]}
    sc = scenario_from_dict(doc, base=tmp_path)
    frame = sc.load_frame()
    assert list(frame.sort_orders) == ["zone"]
    assert (df["zone"].to_numpy()[frame.sort_orders["zone"]] == sorted(df["zone"])).all()
    sc.designs[0].check(frame)
    doc["design"][0]["sort_by"] = "zon"
    with pytest.raises(InputError, match="'zon'.*did you mean 'zone'"):
        scenario_from_dict(doc, base=tmp_path).load_frame()


def test_successive_differences_with_several_starts_uses_list_order():
    """With r starts the merged sample is put in list order before differencing (``list_order``); the
    draw itself, its layout and so the estimate are the same as with the SRS formula from the same seed."""
    frame = Frame.from_dataframe(pd.DataFrame({"y": np.sin(np.arange(60.0))}), target="y")
    a = Systematic("a", n=6, starts=3, variance="successive_differences").draw(
        frame, np.random.default_rng(9), 300, keep_units=True)
    b = Systematic("b", n=6, starts=3).draw(frame, np.random.default_rng(9), 300, keep_units=True)
    assert (a.units == b.units).all()
    listed = np.take_along_axis(a.units, a.list_order, axis=1)
    assert (np.diff(listed, axis=1) >= 0).all()
    ea, eb = horvitz_thompson(a, 60, 1, CONF), horvitz_thompson(b, 60, 1, CONF)
    assert (ea.estimate == eb.estimate).all()
    by_hand = [v3_se(frame.y[row, 0].tolist(), 60) for row in np.sort(a.units[:20], axis=1)]
    assert np.allclose(ea.se[:20, 0], by_hand)


class _LastStart:
    """A stand-in generator whose every uniform is the largest double below 1: the last possible start."""

    def random(self, size):
        return np.full(size, np.nextafter(1.0, 0.0))


@pytest.mark.parametrize("N, n, starts", [(7, 3, 1), (1_000_003, 1000, 1), (999_999, 1000, 2), (10, 10, 1),
                                          (1_000_000, 1000, 1)])
def test_positions_from_the_last_possible_start_stay_on_the_list(N, n, starts):
    """At the last start, u just below K, every position lies on the list (0 .. N - 1) and within one of the
    rule floor(u + j K) (Cochran 1977, sec. 8.1) worked in exact rational arithmetic from the same start:
    floating point may round a position up by one (the last one up to N, which is clamped)."""
    from fractions import Fraction

    frame = Frame.from_dataframe(pd.DataFrame({"y": np.zeros(N)}), target="y")
    d = Systematic("s", n=n, starts=starts)
    pos = d.positions(frame, _LastStart(), 2)  # (B, starts, n / starts)
    m = n // starts
    v = Fraction(float(np.nextafter(1.0, 0.0) * N))  # the start as the package scales it: v = u m, u on [0, K)
    exact = np.array([math.floor((v + j * N) / m) for j in range(m)])
    assert exact.max() == N - 1  # the last start reaches the end of the list
    assert pos.shape == (2, starts, m)
    assert pos.min() >= 0 and pos.max() <= N - 1
    assert np.all(np.abs(pos - exact) <= 1)


def test_last_start_case_is_one_where_rounding_reaches_the_end():
    """The (7, 3) case above is a real one: in floating point (v + 2 N) / 3 rounds to N = 7 itself (exactly
    it is just below 7), so the clamp is what keeps the last position on the list, and the package gives the
    exact rule's positions."""
    from fractions import Fraction

    v = np.nextafter(1.0, 0.0) * 7
    assert math.floor((v + 2 * 7) / 3) == 7
    assert [math.floor((Fraction(v) + j * 7) / 3) for j in range(3)] == [2, 4, 6]
    frame = Frame.from_dataframe(pd.DataFrame({"y": np.zeros(7)}), target="y")
    assert Systematic("s", n=3).positions(frame, _LastStart(), 1).ravel().tolist() == [2, 4, 6]
