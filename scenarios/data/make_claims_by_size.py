"""Regenerate claims_by_size.csv, the invented frame of the size-proportional audit scenario.

3,000 travel and expense claims of a fictional firm over one year.  For every claim the
finance system knows the claimed amount (the size measure and first auxiliary), the nights
booked through the travel desk (second auxiliary), the region, the amount band and the
submission day.  What only an audit reveals: the overpayment (the part of the claim that
breaks the expense rules), the approved amount (claimed minus overpayment) and whether the
claim was overpaid at all (a 0/1 target: its mean is a proportion).  Large claims are more
often wrong, and one region is sloppier than the others.

    python scenarios/data/make_claims_by_size.py
"""

from pathlib import Path

import numpy as np
import pandas as pd

rng = np.random.default_rng(20261202)
n = 3000
claimed = np.round(np.minimum(np.exp(rng.normal(6.0, 1.0, n)), 40000.0), 2)
nights = rng.poisson(claimed / 350.0)
region = rng.choice(["north", "south", "east", "west"], n, p=[0.3, 0.3, 0.2, 0.2])
rank = claimed.argsort().argsort() / (n - 1)  # 0 for the smallest claim, 1 for the largest
p_wrong = (0.04 + 0.22 * rank) * np.where(region == "east", 1.8, 1.0)
wrong = rng.random(n) < p_wrong
share = rng.beta(2.0, 9.0, n)  # share of the claim that breaks the rules, when it is wrong
overpayment = np.round(np.where(wrong, claimed * share, 0.0), 2)
band = pd.cut(claimed, [0, 200, 1000, 5000, np.inf], labels=["under-200", "200-1000", "1000-5000", "over-5000"])
minutes = np.select([claimed < 200, claimed < 1000, claimed < 5000], [12, 20, 35], 60)
df = pd.DataFrame({
    "claim_id": [f"K{i:05d}" for i in range(1, n + 1)],
    "submitted_day": np.sort(rng.integers(1, 366, n)),
    "region": region,
    "band": band.astype(str),
    "claimed": claimed,
    "nights": nights,
    "approved": np.round(claimed - overpayment, 2),
    "overpayment": overpayment,
    "overpaid": wrong.astype(int),
    "audit_cost": minutes * 1.5,  # 1.5 currency units per auditor minute
})
df.to_csv(Path(__file__).with_name("claims_by_size.csv"), index=False)
