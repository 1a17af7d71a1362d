"""Write tollgate_hours.csv: invented hourly vehicle counts at one toll gate over a year.

Every hour of 365 days (8760 rows) in time order.  The expected count follows a daily
profile (quiet nights, a morning peak near 08:00, an evening peak near 17:30), weaker peaks
at weekends, and a mild seasonal swing; counts are gamma-Poisson around it.  Invented data,
for rehearsing designs only.  Run: python make_tollgate_hours.py (seeded, reproducible).
"""

from pathlib import Path

import numpy as np
import pandas as pd

rng = np.random.default_rng(20260101)
hour = np.arange(8760)
day = hour // 24
hod = hour % 24
weekday = (day + 3) % 7  # the year starts on a Thursday; 5 and 6 are Saturday and Sunday
weekend = weekday >= 5
h = hod + 0.5
plateau = 150.0 / (1 + np.exp(-(h - 6.0) * 1.5)) / (1 + np.exp((h - 21.5) * 1.5))
morning = 420.0 * np.exp(-((h - 8.0) ** 2) / (2 * 1.2**2))
evening = 380.0 * np.exp(-((h - 17.5) ** 2) / (2 * 1.5**2))
peaks = np.where(weekend, 0.35, 1.0) * (morning + evening)
season = 1 + 0.12 * np.sin(2 * np.pi * (day - 100) / 365)
mean = season * (40.0 + np.where(weekend, 1.1, 1.0) * plateau + peaks)
shape = 30.0  # gamma-Poisson: variance mean + mean^2 / shape
vehicles = rng.poisson(rng.gamma(shape, mean / shape))
names = np.array(["Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"])
df = pd.DataFrame({"hour": hour + 1, "day": day + 1, "hour_of_day": hod, "weekday": names[weekday],
                   "vehicles": vehicles})
df.to_csv(Path(__file__).with_name("tollgate_hours.csv"), index=False)
print(f"wrote {len(df)} hours, mean {vehicles.mean():.1f} vehicles an hour")
