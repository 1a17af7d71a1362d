"""samplewright draw SCENARIO --design LABEL --out SAMPLE.csv: the real sample and its selection record;
samplewright draw --check SAMPLE.json: the replay an auditor runs."""

from __future__ import annotations

import shlex
import sys
from pathlib import Path

from samplewright.cli.common import whole_number
from samplewright.errors import InputError

NAME = "draw"
HELP = ("draw the one sample fieldwork uses from a design of a scenario, with a selection record "
        "(SAMPLE.json) that `draw --check` replays")


def add_arguments(p) -> None:
    p.add_argument("scenario", nargs="?", help="scenario file (TOML); not given with --check")
    p.add_argument("--design", help="label of the design to draw (default: none; required unless --check)")
    p.add_argument("--size", type=whole_number(1),
                   help="one size of the design's sweep (required when the design has several; default: its size)")
    p.add_argument("--seed", type=whole_number(0),
                   help="seed of the draw (default: taken from the operating system's entropy, printed and recorded)")
    p.add_argument("--reserve", type=whole_number(0), default=0,
                   help="reserve units per stratum (per cluster for two-stage designs), listed after the sample "
                        "in the order they replace non-respondents (default: 0)")
    p.add_argument("--out", help="sample file to write, .csv or .parquet; the record is written beside it with "
                                 "the suffix .json (default: none; required unless --check)")
    p.add_argument("--force", action="store_true", help="overwrite an existing sample file and record "
                                                        "(default: off, refuse)")
    p.add_argument("--check", metavar="SAMPLE.json",
                   help="re-draw the sample a record describes and compare it with the sample file: exit 0 when "
                        "they match, 2 with the first difference (default: none, draw a sample)")


def _command(args, seed: int) -> str:
    """The command that draws this sample again (every option written out, the seed included)."""
    parts = ["samplewright", "draw", args.scenario, "--design", args.design]
    if args.size is not None:
        parts += ["--size", str(args.size)]
    parts += ["--seed", str(seed)]
    if args.reserve:
        parts += ["--reserve", str(args.reserve)]
    return shlex.join(parts + ["--out", args.out])


def main(args) -> int:
    if args.check is not None:
        given = [f"--{k}" for k in ("design", "size", "seed", "out") if getattr(args, k) is not None]
        if args.scenario is not None or given or args.reserve:
            raise InputError(f"--check replays the record alone; leave out {', '.join(given) or 'the scenario'}")
        from samplewright.simulation.selection import check_record

        print(check_record(args.check))
        return 0
    missing = [name for name, value in (("a scenario file", args.scenario), ("--design", args.design),
                                        ("--out", args.out)) if value is None]
    if missing:
        raise InputError(f"draw needs {', '.join(missing)} (or --check SAMPLE.json to replay a record)")
    # imported here, not at the top: `samplewright --help` need not load numpy and pandas
    from samplewright.api import draw
    from samplewright.simulation.scenario import load_scenario
    from samplewright.simulation.selection import new_seed, record_path, write_sample

    for path in (Path(args.out), record_path(args.out)):  # refused before the frame is read
        if path.exists() and not args.force:
            raise InputError(f"{str(path)!r} exists; use --force to overwrite it or choose another --out")
    seed = new_seed() if args.seed is None else args.seed
    sample = draw(load_scenario(args.scenario), args.design, size=args.size, seed=seed, reserve=args.reserve,
                  command=_command(args, seed))
    out, rec = write_sample(sample, args.out, force=args.force)
    record = sample.attrs["selection"]
    for note in record["notes"]:
        print(f"note: {note}", file=sys.stderr)
    if args.seed is None:
        print(f"seed: {seed} (from the operating system's entropy; recorded)")
    main_rows = int((~sample["reserve"]).sum())
    extra = f" and {len(sample) - main_rows} reserve(s)" if args.reserve else ""
    print(f"drew {main_rows} unit(s){extra} of design {args.design!r}; weights sum to "
          f"{record['sum_of_weights']:.6g}; variance estimator: {record['variance_estimator']}")
    print(f"sample written to {out}; selection record to {rec} (replay: samplewright draw --check {rec})")
    return 0
