"""Regenerate expense_claims.csv, the invented frame of the expense-claims audit scenario.

4,000 travel and expense claims of a fictional company over one year: the claimed amount,
its band (the audit strata), the submission day (the list order), the minutes an auditor
needs (a unit cost) and the overstatement an audit would find (the study variable: zero for
most claims, larger and more frequent in the high bands).

    python scenarios/data/make_expense_claims.py
"""

from pathlib import Path

import numpy as np
import pandas as pd

rng = np.random.default_rng(20261201)
n = 4000
amount = np.round(np.minimum(np.exp(rng.normal(5.3, 0.85, n)), 15000.0), 2)
band = pd.cut(amount, [0, 100, 500, 2000, np.inf], labels=["under-100", "100-500", "500-2000", "over-2000"])
p_err = np.select([amount < 100, amount < 500, amount < 2000], [0.04, 0.08, 0.15], 0.25)
err = rng.random(n) < p_err
share = rng.beta(1.5, 6.0, n)  # share of the amount overstated when a claim is wrong
over = np.round(np.where(err, amount * share, 0.0), 2)
day = np.sort(rng.integers(1, 366, n))
minutes = np.select([amount < 100, amount < 500, amount < 2000], [10, 15, 25], 40)
df = pd.DataFrame({
    "claim_id": [f"C{i:05d}" for i in range(1, n + 1)],
    "submitted_day": day,
    "amount": amount,
    "band": band.astype(str),
    "audit_cost": minutes * 1.5,  # 1.5 currency units per auditor minute
    "overstatement": over,
})
df.to_csv(Path(__file__).with_name("expense_claims.csv"), index=False)
