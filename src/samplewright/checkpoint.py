"""Finished blocks kept on disk (DIR/blocks/), so an interrupted run can be resumed.

Each finished block is one ``.npz`` file named for its cell (the crc32 of the design label,
the size index) and block index, written under a temporary name and renamed into place by
the parent process as soon as the block arrives: a crash or Ctrl-C keeps every finished
block and never leaves a half-written one.  ``manifest.json`` beside them records what the
blocks were drawn from (scenario hash, seed, block size, replicate count, stopping rule);
``samplewright run --resume DIR`` reads it back, refuses a mismatch, and runs only the
blocks that are missing.  Since each block's numbers depend only on its seed
(see :mod:`samplewright.engine`), the resumed run gives the same numbers as an
uninterrupted one.
"""

from __future__ import annotations

import json
import re
from dataclasses import fields
from pathlib import Path

import numpy as np

from .errors import InputError
from .outputs import atomic_write, write_json

FOLDER = "blocks"
MANIFEST = "manifest.json"
_NAME = re.compile(r"^c([0-9a-f]{8})-s(\d+)-b(\d+)\.npz$")
_TAGS = ("cell", "block", "start")  # BlockResult fields that are not per-replicate arrays
#: manifest keys that must agree between the saved run and the resumed one
CHECKED = ("scenario_hash", "seed", "block_size", "replicates", "confidence", "until", "max_replicates", "cells")


def block_name(cell, block: int) -> str:
    return f"c{cell.key:08x}-s{cell.size_index}-b{block:06d}.npz"


class BlockStore:
    """The blocks folder of one run.

    Examples
    --------
    >>> import tempfile
    >>> store = BlockStore.create(tempfile.mkdtemp(), {"seed": 1})
    >>> store.manifest["seed"], len(store.finished())
    (1, 0)
    """

    def __init__(self, folder: Path, manifest: dict):
        self.folder = Path(folder)
        self.manifest = manifest

    # ------------------------------------------------------------- opening
    @classmethod
    def create(cls, out, manifest: dict) -> "BlockStore":
        """Start an empty blocks folder in ``out`` (removing blocks a previous run left there)."""
        folder = Path(out) / FOLDER
        folder.mkdir(parents=True, exist_ok=True)
        for p in folder.iterdir():  # only our own files: a forced rerun starts from nothing
            if p.name == MANIFEST or _NAME.match(p.name) or (p.name.startswith(".") and p.suffix == ".tmp"):
                p.unlink()
        write_json(manifest, folder / MANIFEST)
        return cls(folder, manifest)

    @classmethod
    def open(cls, out) -> "BlockStore":
        """Open the blocks folder a previous run left in ``out`` (refused with InputError if none)."""
        folder = Path(out) / FOLDER
        path = folder / MANIFEST
        if not path.exists():
            raise InputError(f"--resume {str(out)!r}: no {FOLDER}/{MANIFEST} there, so nothing to resume "
                             f"(start a run with --out {str(out)!r} first)")
        try:
            manifest = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise InputError(f"--resume {str(out)!r}: {FOLDER}/{MANIFEST} cannot be read: {exc}") from None
        if not isinstance(manifest, dict) or "scenario_hash" not in manifest:
            raise InputError(f"--resume {str(out)!r}: {FOLDER}/{MANIFEST} is not a samplewright blocks manifest")
        return cls(folder, manifest)

    def check(self, manifest: dict, out) -> None:
        """Refuse to resume when the run asked for now differs from the saved one."""
        for key in CHECKED:
            saved, now = self.manifest.get(key), manifest.get(key)
            if saved != now:
                what = {"scenario_hash": "the scenario's content (its hash)", "cells": "the designs and sizes"}
                raise InputError(
                    f"--resume {str(out)!r}: {what.get(key, key)} differs from the saved run "
                    f"(saved {_short(saved)}, now {_short(now)}); resume with the same scenario and "
                    f"options, or start a new run with another --out (or --force)")

    # ------------------------------------------------------------- blocks
    def finished(self) -> set[tuple[int, int, int]]:
        """(cell key, size index, block) of every block on disk."""
        out = set()
        for p in self.folder.iterdir():
            m = _NAME.match(p.name)
            if m:
                out.add((int(m.group(1), 16), int(m.group(2)), int(m.group(3))))
        return out

    def save(self, result, cell) -> None:
        """Write one finished block (atomically)."""
        path = self.folder / block_name(cell, result.block)

        def write(tmp):
            with open(tmp, "wb") as fh:
                np.savez(fh, block=result.block, start=result.start, label=cell.design.label,
                         size_index=cell.size_index, estimators=np.array(cell.estimators),
                         **{f"r_{k}": np.asarray(v) for k, v in _payload(result).items()})

        atomic_write(path, write)

    def load(self, cell, cell_id: int, block: int):
        """Read one block back as a BlockResult tagged with ``cell_id``; None if absent or unreadable."""
        from .engine import BlockResult

        path = self.folder / block_name(cell, block)
        if not path.exists():
            return None
        try:
            with np.load(path, allow_pickle=False) as z:
                if (str(z["label"]) != cell.design.label or int(z["block"]) != block
                        or tuple(z["estimators"].tolist()) != tuple(cell.estimators)):
                    return None
                arrays = {k[2:]: z[k] for k in z.files if k.startswith("r_")}
                start = int(z["start"])
        except (OSError, ValueError, KeyError):
            return None  # not a complete block file: it is drawn again
        try:
            return BlockResult(cell=cell_id, block=block, start=start, **arrays)
        except TypeError:  # saved by a version with other fields: drawn again
            return None


def _payload(result) -> dict:
    """Every per-replicate field of a BlockResult (None fields are left out)."""
    return {f.name: getattr(result, f.name) for f in fields(result)
            if f.name not in _TAGS and getattr(result, f.name) is not None}


def _short(v) -> str:
    s = json.dumps(v, default=str)
    return s if len(s) <= 60 else s[:57] + "..."
