"""Design random streams: keyed by the SHA-256 of the label, so labels that share a crc32 draw apart.

Two labels whose crc32 checksums are equal used to share a random stream, so two designs
drew identical replicates.  The checks: the key is the documented one (recomputed here with
hashlib), two such designs now draw independent replicates (Pearson's correlation test,
scipy.stats.pearsonr), and two designs with one key are refused.
"""

from __future__ import annotations

import hashlib
import zlib

import numpy as np
import pytest
from scipy import stats

from samplewright.api import run
from samplewright.errors import InputError
from samplewright.simulation import engine
from samplewright.simulation.scenario import scenario_from_dict

# found by a birthday search over "srs " + 8 hex digits
TWINS = ("srs 1fdc0ee9", "srs 5fb19e8e")


def _scenario(labels):
    return scenario_from_dict({
        "seed": 11, "replicates": 2000, "block_size": 500,
        "frame": {"synthetic": {"units": 2000, "seed": 3}},
        "design": [{"label": lab, "method": "srs", "n": 30} for lab in labels],
    })


def test_labels_sharing_a_crc32_draw_independent_replicates():
    assert zlib.crc32(TWINS[0].encode()) == zlib.crc32(TWINS[1].encode())
    reps = run(_scenario(TWINS)).replicates
    reps = reps[reps["estimator"] == "ht"]
    a = reps.loc[reps["design"] == TWINS[0], "estimate"].to_numpy()
    b = reps.loc[reps["design"] == TWINS[1], "estimate"].to_numpy()
    assert len(a) == len(b) == 2000 and not np.array_equal(a, b)
    # independent streams: no correlation between the two designs' replicate means
    # (Pearson's test, scipy.stats.pearsonr; p is uniform under independence, fixed seed)
    assert stats.pearsonr(a, b).pvalue > 1e-4


def test_block_seed_is_the_sha256_of_the_label_size_and_block():
    sc = _scenario(["whole frame", "part"])
    cells = engine.make_cells(sc.designs, sc.estimators)
    digest = hashlib.sha256(b"part").digest()
    words = tuple(int.from_bytes(digest[i:i + 4], "big") for i in range(0, 32, 4))
    ss = engine.block_seed(7, cells[1], 3)
    assert ss.entropy == 7 and tuple(ss.spawn_key) == (*words, 0, 3)


def test_two_designs_with_one_stream_key_are_refused():
    sc = _scenario(["alpha"])
    d, est = sc.designs[0], sc.estimators[0]
    with pytest.raises(InputError, match="'alpha' and 'alpha' would draw the same random numbers"):
        engine.make_cells((d, d), (est, est))
