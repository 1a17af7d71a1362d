"""A run's replicate table streamed to disk, and the tables built cell by cell as it streams.

A run without a ``[goal]`` (and without a stopping rule or assumption points) never holds its whole
replicate table: the engine hands over one design x size cell at a time
(:func:`~samplewright.simulation.engine.simulate_cells`), :class:`CellTables` computes that cell's summary
rows, its cost and MSE tallies for the frontier and its fieldwork columns from the cell's arrays alone
(the same functions the whole-table path calls, so the numbers are the same bits), and writes the cell's
rows to a temporary Parquet file in the run's ``blocks/`` folder, piece by piece.  ``RunResult.write``
renames that file into place as ``replicates.parquet``; until then, and after, :class:`ReplicateFile`
reads it back on demand (the report and ``samplewright report`` still read the whole table).
"""

from __future__ import annotations

import os
import shutil
import weakref
from pathlib import Path

import pandas as pd

from samplewright.decision.frontier import cost_frame, mse_frame
from samplewright.evaluation.measures import cost_row, mse_row, point_row, summary_frame
from samplewright.evaluation.nonresponse import FIELD_ARRAYS, fieldwork_row, with_fieldwork
from samplewright.evaluation.normal import normal_quantile
from samplewright.files import ParquetRows, atomic_write
from samplewright.simulation.engine import CellArrays, cell_pieces
from samplewright.simulation.limits import PIECE_ROWS


def _unlink(path: str) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass


class ReplicateFile:
    """The replicate table of a run as a Parquet file, read on first use and kept from then on.

    While ``temporary`` (in the run's ``blocks/`` folder, before the result is written) the file is
    deleted when this object is no longer referenced; :meth:`place` moves it to its final name.
    """

    def __init__(self, path, temporary: bool = True):
        self.path = Path(path)
        self.temporary = temporary
        self._table = None
        self._finalizer = weakref.finalize(self, _unlink, str(self.path)) if temporary else None

    def read(self) -> pd.DataFrame:
        if self._table is None:
            self._table = pd.read_parquet(self.path)
        return self._table

    def place(self, dest) -> Path:
        """Put the table at ``dest``: the temporary file is renamed there (copied across file systems),
        a placed one copied (atomically, :func:`samplewright.files.atomic_write`)."""
        dest = Path(dest)
        if not self.temporary:
            if dest.resolve() != self.path.resolve():
                atomic_write(dest, lambda t: shutil.copyfile(self.path, t))
            return dest
        try:
            os.replace(self.path, dest)
        except OSError:  # another file system: copied into place, then the temporary file goes
            atomic_write(dest, lambda t: shutil.copyfile(self.path, t))
            _unlink(str(self.path))
        self._finalizer.detach()
        self.path, self.temporary = dest, False
        return dest


class CellTables:
    """The summary, frontier tallies and replicate file of a streamed run, one cell at a time (module notes).

    ``plan`` is the run's :class:`~samplewright.simulation.plan.RunPlan`; ``folder`` where the temporary
    replicate file goes (the run's ``blocks/`` folder).  Feed every cell in cell order to :meth:`add`,
    then :meth:`finish`.
    """

    def __init__(self, plan, methods: dict[str, str], folder, rows: int = PIECE_ROWS):
        truth = plan.truth
        self.names = list(plan.frame.layout.names)
        self.truth = dict(zip(truth.layout.names, truth.layout.truth))
        self.S2 = dict(zip(truth.layout.names, truth.layout.S2))
        self.N = truth.N
        self.z = normal_quantile(plan.confidence)
        self.methods = methods
        self.fieldwork = plan.fieldwork
        self.rows = rows
        self.summary_rows, self.field_rows, self.cost_rows, self.mse_rows = [], [], [], []
        # dictionary-encoded: the text columns and the size (few values each), not the replicate numbers
        self.file = ParquetRows(Path(folder) / "replicates.parquet",
                                dictionary=["design", "size", "estimator", "variable", "variance"])

    def add(self, cell, arrays: CellArrays) -> None:
        """One cell's summary rows, tallies and replicate rows (cells must come in the plan's order)."""
        label, size = cell.design.label, int(cell.design.size)
        pts, reps = arrays.points, arrays.reps
        for p, (est, formula) in enumerate(cell.points):
            for v, var in enumerate(self.names):
                key = {"design": label, "method": self.methods.get(label, ""), "size": size, "estimator": est,
                       "variable": var, "variance": formula}
                x = pts["estimate"][p, v]
                truth = float(self.truth[var])
                self.mse_rows.append({"design": label, "size": size, "estimator": est, "variance": formula,
                                      "variable": var, "mse_mcse": mse_row(x, truth)})
                row = point_row(key, x, pts["se"][p, v], pts["lower"][p, v], pts["upper"][p, v], reps["n"],
                                reps["cost"], self.truth[var], self.S2[var], self.N, self.z)
                if row is None:
                    continue
                self.summary_rows.append(row)
                if self.fieldwork is not None:
                    g = {k: pts[k][p, v] if k in pts else reps[k] for k in FIELD_ARRAYS}
                    self.field_rows.append(fieldwork_row(label, est, var, g, self.fieldwork))
        self.cost_rows.append({"design": label, "size": size, **cost_row(reps["cost"])})
        for piece in cell_pieces(cell, arrays, self.names, self.rows):
            self.file.write(piece)

    @property
    def summary(self) -> pd.DataFrame:
        summary = summary_frame(self.summary_rows)
        return summary if self.fieldwork is None else with_fieldwork(summary, self.field_rows)

    @property
    def costs(self) -> pd.DataFrame:
        """The frontier's cost table (:func:`~samplewright.decision.frontier.cost_quantile`'s)."""
        return cost_frame(self.cost_rows)

    @property
    def mses(self) -> pd.DataFrame:
        """The frontier's MSE MCSE table (:func:`~samplewright.decision.frontier.mse_mcse`'s)."""
        return mse_frame(self.mse_rows)

    def finish(self) -> ReplicateFile:
        """The replicate file, complete (still temporary: ``RunResult.write`` places it)."""
        return ReplicateFile(self.file.close())

    def discard(self) -> None:
        self.file.discard()

