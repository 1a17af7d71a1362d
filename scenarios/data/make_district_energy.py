"""Write district_energy.csv: an invented register of 6,000 households for the energy-use scenario.

Run from this folder: ``python make_district_energy.py`` (numpy only; seeded, so the file is
reproducible).  Structure, all invented:

- four neighbourhoods (the strata) with different typical electricity use and spread;
- 250 street blocks (the clusters) of 24 households each, nested in neighbourhoods; houses
  on one block resemble each other (a block effect, intra-block correlation about 0.15);
- the register lists neighbourhood by neighbourhood, block by block, house by house; every
  8th listed house is an end-of-terrace house that uses about 45% more (so the list has a
  cycle of period 8 along its order, the trap for a systematic sample with interval 8 or 24);
- ``travel`` is the field team's cost of reaching a block (the outskirts are far).
"""

from pathlib import Path

import numpy as np

HOODS = [  # name, blocks, mean kWh/year, sd, travel to a block
    ("old-town", 62, 3200.0, 900.0, 20.0),
    ("terraces", 75, 2800.0, 700.0, 25.0),
    ("estates", 75, 4200.0, 1500.0, 35.0),
    ("outskirts", 38, 6000.0, 2500.0, 90.0),
]
PER_BLOCK = 24
ICC = 0.15
END_OF_TERRACE = 1.45


def main(out=Path(__file__).with_name("district_energy.csv")) -> None:
    rng = np.random.default_rng(20261201)
    rows = []
    block_no = 0
    for name, blocks, mean, sd, travel in HOODS:
        for _ in range(blocks):
            block_no += 1
            effect = rng.normal(0.0, np.sqrt(ICC) * sd)
            shape = 4.0  # gamma noise, skewness 2 / sqrt(4) = 1
            noise = (rng.gamma(shape, 1.0, PER_BLOCK) - shape) / np.sqrt(shape) * np.sqrt(1 - ICC) * sd
            kwh = mean + effect + noise
            pos = np.arange(PER_BLOCK)
            kwh = np.where(pos % 8 == 0, kwh * END_OF_TERRACE, kwh)
            kwh = np.maximum(np.round(kwh), 300.0)
            cost = round(travel * rng.uniform(0.7, 1.3))
            for p in range(PER_BLOCK):
                rows.append((len(rows) + 1, name, f"B{block_no:03d}", len(rows) + 1, int(kwh[p]), cost))
    with open(out, "w", encoding="utf-8") as fh:
        fh.write("household,neighbourhood,block,listing,kwh,travel\n")
        for r in rows:
            fh.write(",".join(str(x) for x in r) + "\n")
    print(f"wrote {len(rows)} households to {out}")


if __name__ == "__main__":
    main()
