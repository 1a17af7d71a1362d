"""Evidence of a cycle along the frame's list order, kept with a run (frame_order.csv) for the report's figure.

When a run has a systematic design and the frame-order detector
(:func:`samplewright.diagnostics.periodicity.frame_order_report`) finds a cycle along the order that
design walks, the run keeps a small table (``frame_order.csv``: the first few cycles of its
strongest period, along that order) and the detected periods (run.json ``frame_order``), so the report
can show the cycle and where every k-th unit falls on it without the frame.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from samplewright.diagnostics.periodicity import frame_order_report, interval_risks, unsafe_intervals

FRAME_ORDER_COLUMNS = ["order", "variable", "position", "value"]
#: cycles of the longest detected period shown, and the most list positions kept per order and target
CYCLES_SHOWN = 8
MAX_POSITIONS = 3000


def _along(sort_by) -> str:
    return "list order" if sort_by is None else f"sorted by {sort_by}"


def order_evidence(frame, designs) -> tuple[list | None, pd.DataFrame | None]:
    """(periods per order and target, the table of values) for the run, or (None, None).

    Only the orders walked by the run's systematic designs, and only where a detected period
    makes the interval of at least one of them unsafe (:func:`samplewright.diagnostics.periodicity.interval_risks`,
    the rule behind the run's warnings): a weak cycle that puts no design at risk is not shown.
    """
    systematic = [d for d in designs if getattr(d, "method", None) == "systematic"]
    if not systematic:
        return None, None
    infos, tables, seen = [], [], set()
    for d in systematic:
        sort_by = getattr(d, "sort_by", None)
        for v, name in enumerate(frame.variables):
            if (sort_by, v) in seen:
                continue
            seen.add((sort_by, v))
            rep = frame_order_report(frame, v, sort_by)
            walkers = [x for x in systematic if getattr(x, "sort_by", None) == sort_by]
            at_risk = [
                x.label
                for x in walkers
                for size in x.sizes()
                if interval_risks(x.at(size).interval(frame), rep)
            ]
            if not at_risk:
                continue
            strongest = max(rep.periods, key=lambda p: p.strength).period
            W = int(min(frame.N, MAX_POSITIONS, max(200, math.ceil(CYCLES_SHOWN * strongest))))
            order = frame.order if sort_by is None else frame.sort_orders[sort_by]
            vals = np.asarray(frame.y[np.asarray(order)[:W], v], dtype=float)
            along = _along(sort_by)
            tables.append(
                pd.DataFrame(
                    {"order": along, "variable": name, "position": np.arange(1, W + 1), "value": vals}
                )
            )
            infos.append(
                {
                    "order": along,
                    "sort_by": sort_by,
                    "variable": name,
                    "units": int(frame.N),
                    "positions_kept": W,
                    "periods": [p.as_dict() for p in rep.periods],
                    "unsafe_intervals": unsafe_intervals(rep),
                    "designs": [x.label for x in walkers],
                    "designs_at_risk": list(dict.fromkeys(at_risk)),
                    "walks": [
                        {"design": x.label, "size": int(size), "interval": float(x.at(size).interval(frame)),
                         "starts": int(getattr(x, "starts", 1) or 1)}
                        for x in walkers
                        for size in x.sizes()
                    ],
                }
            )
    if not infos:
        return None, None
    return infos, pd.concat(tables, ignore_index=True)[FRAME_ORDER_COLUMNS]
