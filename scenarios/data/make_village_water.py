"""Write village_water.csv: an invented register of households for the water-quality scenarios.

Run from this folder: ``python make_village_water.py`` (numpy only; seeded, so the file is
reproducible).  Structure, all invented:

- 200 villages (the clusters) in two zones (the strata): 140 roadside villages within
  25 km of the district town and 60 remote villages beyond it; 30 to 60 households each;
- each household's drinking-water source (piped, well or surface) is more often a well or
  surface water in remote villages;
- ``coliform`` is the E. coli count in a household's stored drinking water (per 100 mL):
  skewed, higher from wells and surface water, and higher in remote villages; households of
  one village share a village effect (the water point they use);
- ``travel`` is the field team's cost of reaching a village (grows with its distance).
"""

from pathlib import Path

import numpy as np

VILLAGES = 200
REMOTE = 60
SOURCE_MEAN = {"piped": 6.0, "well": 18.0, "surface": 35.0}  # mean coliform by source


def main(out=Path(__file__).with_name("village_water.csv")) -> None:
    rng = np.random.default_rng(20261202)
    rows = []
    for v in range(VILLAGES):
        remote = v >= VILLAGES - REMOTE
        distance = rng.uniform(26.0, 70.0) if remote else rng.uniform(2.0, 25.0)
        size = int(rng.integers(30, 61))
        shares = [0.15, 0.55, 0.30] if remote else [0.55, 0.35, 0.10]
        source = rng.choice(list(SOURCE_MEAN), size=size, p=shares)
        effect = rng.lognormal(0.0, 0.30)  # the village's water points, multiplicative
        zone_factor = 1.6 if remote else 1.0
        mean = np.array([SOURCE_MEAN[s] for s in source]) * effect * zone_factor
        coliform = np.round(rng.gamma(8.0, mean / 8.0), 1)
        travel = round(50.0 + 6.0 * distance)
        for k in range(size):
            rows.append((len(rows) + 1, f"V{v + 1:03d}", "remote" if remote else "roadside", round(distance, 1),
                         source[k], coliform[k], travel))
    with open(out, "w", encoding="utf-8") as fh:
        fh.write("household,village,zone,distance_km,source,coliform,travel\n")
        for r in rows:
            fh.write(",".join(str(x) for x in r) + "\n")


if __name__ == "__main__":
    main()
