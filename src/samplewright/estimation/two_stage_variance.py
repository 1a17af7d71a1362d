"""Variance estimators for two-stage cluster samples (named in :mod:`samplewright.estimation.registry`).

A two-stage design (``cluster`` or ``stratified_cluster`` with ``units_per_cluster``) lays
its block out unit by unit: each position is one second-stage unit, ``SampleBlock.psu``
names the cluster (first-stage unit, "slot") it belongs to, ``psu_stratum`` and ``fpc``
describe the first stage (design stratum of the slot, 1 - m_h / C_h) and
``SampleBlock.within_fpc`` holds each slot's factor for its within-cluster term (set at draw
time by :func:`samplewright.designs.cluster.within_factor`).  The
estimators' linearised values are formed unit by unit, so every estimator (HT, Hajek,
ratio, GREG, post-stratified, domains) gets the same two-stage formula.

Notes
-----
With first-stage inclusion probability pi_i of cluster i (weight w_i = 1 / pi_i), t_i the
estimated total of cluster i from its k_i of M_i units (SRS, f_2i = k_i / M_i), and z_ij =
w_i (M_i / k_i) y_ij the expanded unit values:

- ``two_stage`` (the default): within stratum h, SRS of m_h of C_h clusters,

      v = sum_h (1 - f_1h) C_h^2 s_th^2 / m_h + sum_i w_i M_i^2 (1 - f_2i) s_2i^2 / k_i,

  with s_th^2 the variance of the estimated cluster totals and s_2i^2 the within-cluster
  sample variance; unbiased for the variance of the HT total (Cochran 1977, Theorem 11.2
  for equal sizes and its unequal-size form in ch. 11, section from memory; Sarndal,
  Swensson & Wretman 1992, Result 4.3.1).  A cluster with one sampled unit has no s_2i^2
  and adds no within-cluster term (the designs note it when such a cluster is taken with
  certainty, where that term is all its variance).
  The second term is, per cluster, the shared between-PSU routine on its units z_ij with
  correction pi_i (1 - f_2i): (1 - f_2i) pi_i k_i s_z^2 = w_i M_i^2 (1 - f_2i) s_2i^2 / k_i.
- ``ultimate_cluster``: the first term only (the between-cluster estimator with the
  first-stage correction).  Its expectation falls short of the true variance by
  sum_i M_i^2 (1 - f_2i) S_2i^2 / k_i over every cluster of the sampled strata; for the
  mean with equal sizes that is f_1 (1 - f_2) S_2^2 / (m k), the second term of Cochran's
  Theorem 11.2 (derived here from E s_t^2 = S_t^2 + mean of the second-stage variances).
- Take-all rule (both options): a cluster taken with certainty (pi_i = 1: every cluster
  of its stratum is drawn, or a size-proportional certainty cluster) has first-stage
  correction 0 and keeps its within-cluster term with factor 1 - f_2i; its units are in
  effect the PSUs of a stratum of their own, as for certainty units of pi-ps designs.
- Size-proportional selection of clusters (``stratified_cluster`` with ``selection =
  "pps"``) uses the with-replacement approximation for the first stage (no correction):
  that form already estimates the second-stage variance (SSW 1992, sec. 4.6), so no
  within-cluster term is added for the drawn clusters under either option; certainty
  clusters follow the take-all rule.

With one stage (whole clusters) there is no second stage: both options are the
between-cluster estimator with the first-stage correction, exact (Cochran 1977, ch. 9).

Degrees of freedom: clusters minus strata over the strata that are sampled, plus, in a
take-all stratum, units minus clusters (its units act as the PSUs).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from samplewright.designs.block import SampleBlock
from samplewright.estimation.variance import psu_counts, stratified_psu_variance


def _slot_starts(block: SampleBlock) -> np.ndarray:
    psu = block.psu
    return np.flatnonzero(np.concatenate([[True], psu[1:] != psu[:-1]]))


def slot_shares(block: SampleBlock) -> np.ndarray:
    """(B, m) weights of the real positions, summing to 1 within each cluster slot: a replicate
    constant spread by them adds the same to every cluster total and nothing within a cluster,
    so it adds no variance (as a constant per PSU does in a one-stage block)."""
    real = np.ones(block.sums.shape[:2]) if block.mask is None else block.mask.astype(float)
    starts = _slot_starts(block)
    per_slot = np.add.reduceat(real, starts, axis=1)  # (B, S) real units per slot
    return real / np.maximum(per_slot, 1.0)[:, block.psu]


def _first_stage(z: np.ndarray, block: SampleBlock):
    """Estimated cluster totals (B, S, V) and the block seen at the first stage (every slot a cluster)."""
    starts = _slot_starts(block)
    Z = np.add.reduceat(z, starts, axis=1)
    view = dataclasses.replace(block, sums=Z, psu_stratum=block.psu_stratum[starts], mask=None, psu=None,
                               within_fpc=None)
    return Z, view


def _within(block: SampleBlock) -> SampleBlock:
    """The block with each slot as a stratum of its units and the slot's within factor as its correction."""
    return dataclasses.replace(block, psu_stratum=block.psu, fpc=block.within_fpc, psu=None, within_fpc=None)


def first_stage_variance(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """The between-PSU variance of the estimated total from the PSUs' totals (the first stage alone).
    A block without ``psu`` has its positions as PSUs."""
    if block.psu is None:
        return stratified_psu_variance(z, block)
    Z, first = _first_stage(z, block)
    return stratified_psu_variance(Z, first)


def two_stage_variance(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Two-stage variance of the estimated total (``two_stage`` or ``ultimate_cluster``, by the
    block's ``within_fpc``); see module notes.  A one-stage block (no ``psu``) has no second
    stage: the clusters are its PSUs and the between-PSU routine is the whole estimator."""
    if block.psu is None:
        return stratified_psu_variance(z, block)
    return first_stage_variance(z, block) + stratified_psu_variance(z, _within(block))


def degrees_of_freedom(block: SampleBlock) -> np.ndarray:
    """Clusters minus strata, with units minus clusters in take-all strata (see module notes)."""
    starts = _slot_starts(block)
    first = dataclasses.replace(block, sums=block.sums[:, starts, :0], psu_stratum=block.psu_stratum[starts],
                                mask=None, psu=None, within_fpc=None)
    n_h = psu_counts(first)  # (B, H) clusters per stratum
    sampled = (block.fpc > 0)[None, :]
    df = np.where(sampled, np.maximum(n_h - 1.0, 0.0), 0.0).sum(axis=1)
    n_i = psu_counts(_within(block))  # (B, S) units per slot
    take_all = block.fpc[block.psu_stratum[starts]] == 0
    return df + np.where(take_all[None, :], np.maximum(n_i - 1.0, 0.0), 0.0).sum(axis=1)
