"""Finished blocks kept on disk (DIR/blocks/), so an interrupted run can be resumed.

Each finished block is one ``.npz`` file named for its cell (the design's stream key, i.e.
the SHA-256 of its label, and the size index) and block index, written under a temporary
name and renamed into place by the parent process as soon as the block arrives: a crash or
Ctrl-C keeps every finished block and never leaves a half-written one.  Each file holds the
SHA-256 of its arrays.  ``manifest.json`` beside them records what the blocks were drawn from
(scenario hash, frame content hash, seed, block size, replicate count, stopping rule) and the
format of the block files (:data:`BLOCK_FORMAT`); ``samplewright run --resume DIR`` reads it
back, refuses a mismatch, a manifest value of the wrong type or a folder of another block
format, and runs only the blocks that are missing.  A block file that cannot be read, belongs
elsewhere, has arrays of the wrong shape or fails its checksum is drawn again (with a warning).
Since each block's numbers depend only on its seed (see :mod:`samplewright.simulation.engine`),
the resumed run gives the same numbers as an uninterrupted one.  Once a run's tables are
written the command removes the folder (:func:`remove`) unless asked to keep it, and run.json
records which (``blocks_kept``).
"""

from __future__ import annotations

import hashlib
import io
import json
import re
from dataclasses import fields
from pathlib import Path

import numpy as np

from samplewright.errors import InputError
from samplewright.files import atomic_write, write_json
from samplewright.simulation.blocks import BlockResult

FOLDER = "blocks"
MANIFEST = "manifest.json"
#: the format of the block files: 2 since each block holds every variance formula of its design (a
#: ``variances`` tag and one row per estimator x formula); a folder of another format is not resumed
BLOCK_FORMAT = 2
#: run.json key: whether a finished run kept its blocks folder (``--keep-blocks``)
KEPT = "blocks_kept"
_NAME = re.compile(r"^c([0-9a-f]{64})-s(\d+)-b(\d+)\.npz$")
_TAGS = ("cell", "block", "start")  # BlockResult fields that are not per-replicate arrays
_PER_ESTIMATOR = ("estimate", "se", "lower", "upper")  # (points, B, V) arrays (also with a full_ prefix)
#: manifest keys that must agree between the saved run and the resumed one
CHECKED = ("scenario_hash", "frame_hash", "seed", "block_size", "replicates", "confidence", "until",
           "max_replicates", "cells")


def _count(minimum):
    return lambda v: isinstance(v, int) and not isinstance(v, bool) and v >= minimum


def _text(v) -> bool:
    return isinstance(v, str)


#: manifest key -> (its test, what it must be, may it be null)
_TYPES = {
    "scenario": (_text, "a file path", True),
    "scenario_hash": (_text, "a hash (text)", False),
    "frame": (_text, "a file name", True),
    "frame_hash": (_text, "a hash (text)", False),
    "seed": (_count(0), "a whole number of at least 0", False),
    "block_size": (_count(1), "a whole number of at least 1", False),
    "replicates": (_count(1), "a whole number of at least 1", False),
    "confidence": (lambda v: isinstance(v, (int, float)) and not isinstance(v, bool) and 0 < v < 1,
                   "a number between 0 and 1", False),
    "until": (_text, "a stopping rule (text)", True),
    "max_replicates": (_count(1), "a whole number of at least 1", True),
    "cells": (lambda v: isinstance(v, list) and all(
        isinstance(c, list) and len(c) == 2 and _text(c[0]) and _count(1)(c[1]) for c in v),
        "a list of [label, size] pairs", False),
}


def block_name(cell, block: int) -> str:
    return f"c{''.join(f'{w:08x}' for w in cell.key)}-s{cell.size_index}-b{block:06d}.npz"


def checksum(arrays: dict) -> str:
    """SHA-256 of a block's named arrays (names, dtypes, shapes and bytes)."""
    h = hashlib.sha256()
    for k in sorted(arrays):
        a = np.ascontiguousarray(arrays[k])
        h.update(f"{k}:{a.dtype.str}{a.shape}:".encode())
        h.update(a)
    return h.hexdigest()


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
        self.warn = None  # called with the text of each warning (a damaged block drawn again)

    # ------------------------------------------------------------- opening
    @classmethod
    def create(cls, out, manifest: dict) -> BlockStore:
        """Start an empty blocks folder in ``out`` (removing blocks a previous run left there)."""
        folder = Path(out) / FOLDER
        folder.mkdir(parents=True, exist_ok=True)
        _clear(folder)  # a forced rerun starts from nothing
        manifest = {**manifest, "block_format": BLOCK_FORMAT}
        write_json(manifest, folder / MANIFEST)
        return cls(folder, manifest)

    @classmethod
    def open(cls, out) -> BlockStore:
        """Open the blocks folder a previous run left in ``out`` (refused with InputError if none)."""
        folder = Path(out) / FOLDER
        path = folder / MANIFEST
        if not path.exists():
            if _removed(out):
                raise InputError(f"--resume {str(out)!r}: that run finished and its {FOLDER}/ folder was removed, "
                                 f"so there is nothing to resume (a run started with --keep-blocks keeps it)")
            raise InputError(f"--resume {str(out)!r}: no {FOLDER}/{MANIFEST} there, so nothing to resume "
                             f"(start a run with --out {str(out)!r} first)")
        if not path.is_file():  # a folder, FIFO or device: never read (a FIFO would hang)
            raise InputError(f"--resume {str(out)!r}: {FOLDER}/{MANIFEST} is not a regular file")
        try:
            manifest = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError, RecursionError) as exc:
            raise InputError(f"--resume {str(out)!r}: {FOLDER}/{MANIFEST} cannot be read: {exc}") from None
        if not isinstance(manifest, dict) or "scenario_hash" not in manifest:
            raise InputError(f"--resume {str(out)!r}: {FOLDER}/{MANIFEST} is not a samplewright blocks manifest")
        for key, (ok, what, nullable) in _TYPES.items():
            v = manifest.get(key)
            if not (ok(v) or (nullable and v is None)):
                raise InputError(f"--resume {str(out)!r}: {FOLDER}/{MANIFEST} key {key!r} must be {what}, "
                                 f"got {'nothing' if key not in manifest else _short(v)}")
        if manifest.get("block_format", 1) != BLOCK_FORMAT:
            raise InputError(f"--resume {str(out)!r}: its blocks were saved in block format "
                             f"{_short(manifest.get('block_format', 1))} (this samplewright keeps format "
                             f"{BLOCK_FORMAT}, with each block's variance formulas), so they cannot be resumed; "
                             f"start a new run with another --out (or --force)")
        return cls(folder, manifest)

    def check(self, manifest: dict, out) -> None:
        """Refuse to resume when the run asked for now differs from the saved one."""
        for key in CHECKED:
            saved, now = self.manifest.get(key), manifest.get(key)
            if saved != now and key == "frame_hash":
                raise InputError(
                    f"--resume {str(out)!r}: the frame {manifest.get('frame')!r} changed since the saved run "
                    f"(its content hash differs), so the finished blocks were drawn from another population; "
                    f"resume with the original frame, or start a new run with another --out (or --force)")
            if saved != now:
                what = {"scenario_hash": "the scenario's content (its hash)", "cells": "the designs and sizes"}
                raise InputError(
                    f"--resume {str(out)!r}: {what.get(key, key)} differs from the saved run "
                    f"(saved {_short(saved)}, now {_short(now)}); resume with the same scenario and "
                    f"options, or start a new run with another --out (or --force)")

    # ------------------------------------------------------------- blocks
    def finished(self) -> set[tuple[tuple[int, ...], int, int]]:
        """(cell key, size index, block) of every block on disk."""
        out = set()
        for p in self.folder.iterdir():
            m = _NAME.match(p.name)
            if m:
                h = m.group(1)
                key = tuple(int(h[i:i + 8], 16) for i in range(0, 64, 8))
                out.add((key, int(m.group(2)), int(m.group(3))))
        return out

    def save(self, result, cell) -> None:
        """Write one finished block (atomically), with the checksum of everything it holds."""
        path = self.folder / block_name(cell, result.block)
        content = {"block": result.block, "start": result.start, "label": cell.design.label,
                   "size_index": cell.size_index, "estimators": np.array(cell.estimators),
                   "variances": np.array(cell.variances),
                   **{f"r_{k}": v for k, v in _payload(result).items()}}
        content = {k: np.asarray(v) for k, v in content.items()}

        buffer = io.BytesIO()  # built in memory, then written in one write
        np.savez(buffer, checksum=checksum(content), **content)

        def write(tmp):
            # the new temporary file is empty: opened without truncating it, since a truncation to
            # zero makes ext4 write the file back to disk at close (auto_da_alloc), and deleting
            # hundreds of written-back blocks at the end of a run then waits on the disk
            with open(tmp, "r+b") as fh:
                fh.write(buffer.getbuffer())

        atomic_write(path, write)

    def discard(self, cell, block: int) -> None:
        """Delete one block's file, if any: a partial last block that is about to be drawn again in full
        (adding replicates to a cell), so reading it back is not a damaged block to warn about."""
        (self.folder / block_name(cell, block)).unlink(missing_ok=True)

    def load(self, cell, cell_id: int, block: int, start: int, count: int, width: int):
        """Read one block back as a BlockResult tagged with ``cell_id``, or None.

        None when the file is absent, and also (with a warning through ``self.warn``) when it
        cannot be read (truncated, damaged), fails its checksum, or is not the block asked for:
        another design, block, estimator list or variance list, or arrays of another shape than
        ``count`` replicates of ``width`` variables for each estimator x formula.  The block is then drawn again.
        """
        path = self.folder / block_name(cell, block)
        if not path.is_file():  # absent (a FIFO or a loop in its place is not read either)
            return None
        try:
            with open(path, "rb") as fh, np.load(fh, allow_pickle=False) as z:  # fh closed even if np.load fails
                content = {k: z[k] for k in z.files}
        except Exception as exc:  # noqa: BLE001 -- whatever a damaged file raises, the block is drawn again
            why = f"cannot be read ({type(exc).__name__}: it is truncated or damaged)"
        else:
            why = _mismatch(content, cell, block, start, count, width)
        if why is None:
            arrays = {k[2:]: v for k, v in content.items() if k.startswith("r_")}
            return BlockResult(cell=cell_id, block=block, start=start, **arrays)
        if self.warn is not None:
            self.warn(f"block file {str(path)!r} {why}; its replicates are drawn again")
        return None


def remove(out) -> None:
    """Delete the blocks folder in ``out`` once the run's tables are written (nothing is left to resume).

    Only the files a run writes there go, the manifest last, so an interruption midway leaves a
    folder that still resumes; a folder holding anything else is left in place.
    """
    folder = Path(out) / FOLDER
    if not folder.is_dir():
        return
    _clear(folder)
    try:
        folder.rmdir()
    except OSError:  # it holds a file that is not ours: never deleted
        pass


def _clear(folder: Path) -> None:
    """Delete the block files, temporary files and manifest of a run from ``folder`` (the manifest last)."""
    ours = [p for p in folder.iterdir() if _NAME.match(p.name) or (p.name.startswith(".") and p.suffix == ".tmp")]
    for p in ours:
        p.unlink()
    (folder / MANIFEST).unlink(missing_ok=True)


def _removed(out) -> bool:
    """Whether ``out`` holds a finished run whose run.json says its blocks folder was removed."""
    path = Path(out) / "run.json"
    if not path.is_file():  # absent, or a FIFO that would hang: the usual refusal applies
        return False
    try:
        info = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return False
    return isinstance(info, dict) and info.get(KEPT) is False


def _mismatch(content: dict, cell, block: int, start: int, count: int, width: int) -> str | None:
    """Why a block file's ``content`` is not the block asked for (None when it is)."""
    saved = content.pop("checksum", None)
    if saved is None or saved.shape != () or str(saved) != checksum(content):
        return "fails its checksum (it was altered or damaged)"
    try:
        tags = (str(content["label"]), int(content["block"]), int(content["start"]),
                tuple(content["estimators"].tolist()), tuple(content["variances"].tolist()))
    except (KeyError, TypeError, ValueError):
        return "lacks the tags of a block"
    if tags != (cell.design.label, block, start, tuple(cell.estimators), tuple(cell.variances)):
        return "belongs to another design, block, estimator list or variance list"
    names = {k[2:] for k in content if k.startswith("r_")}
    allowed = {f.name for f in fields(BlockResult)} - set(_TAGS)
    if not {"n", "cost", *_PER_ESTIMATOR} <= names <= allowed:
        return "does not hold the arrays of a block"
    E = len(cell.points)
    for k in sorted(names):
        a = content["r_" + k]
        shape = (E, count, width) if k.removeprefix("full_") in _PER_ESTIMATOR else (count,)
        if a.shape != shape or a.dtype.kind not in "biuf":
            return f"holds {k} as {a.dtype} of shape {a.shape}, not numbers of shape {shape}"
    return None


def _payload(result) -> dict:
    """Every per-replicate field of a BlockResult (None fields are left out)."""
    return {f.name: getattr(result, f.name) for f in fields(result)
            if f.name not in _TAGS and getattr(result, f.name) is not None}


def _short(v) -> str:
    s = json.dumps(v, default=str)
    return s if len(s) <= 60 else s[:57] + "..."
