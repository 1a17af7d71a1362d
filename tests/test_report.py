"""The stakeholder report: figures, report.html, brief.md, `samplewright report`, the Python API.

The run here is small and invented (for exercising code); the checks are structural (every
figure drawn, of the promised size, embedded byte for byte; every section present; nothing
re-simulated), plus the ranked-interval order of Morris, White & Crowther (2019), sec. 6.
"""

from __future__ import annotations

import base64
import importlib.metadata
import io
import json
import struct
import zlib
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

import samplewright
from samplewright.cli import main as cli
from samplewright.report import figures as F
from samplewright.report.findings import coverage_verdict
from samplewright.report.table import with_mcse

EXPECTED_FIGURES = {
    "verdict",
    "sampling_distribution",
    "bias",
    "coverage",
    "se_check",
    "intervals",
    "cost_precision",
    "allocation",
}
SECTIONS = {"scenario", "recommendation", "summary", "figures", "warnings", "metadata", "cautions"}

SCENARIO = {
    "title": "Depot tyre-wear audit (test)",
    "seed": 99,
    "replicates": 300,
    "frame": {
        "synthetic": {
            "units": 3000,
            "seed": 5,
            "target": "wear",
            "order": "grouped",
            "skew": "gamma",
            "skewness": 0.8,
            "strata": [
                {"name": "north", "share": 0.5, "mean": 40, "sd": 8},
                {"name": "south", "share": 0.3, "mean": 55, "sd": 15},
                {"name": "hills", "share": 0.2, "mean": 70, "sd": 25},
            ],
            "clusters": {"mean_size": 30, "icc": 0.2},
        },
        "target": "wear",
    },
    "design": [
        {"label": "simple random", "method": "srs", "n": [60, 120]},
        {"label": "by depot region", "method": "stratified", "n": 120, "allocation": "neyman"},
        {"label": "every k-th tyre", "method": "systematic", "n": 120},
        {"label": "whole depots", "method": "cluster", "clusters": 4},
    ],
    "cost": {"fixed": 500.0, "per_unit": 3.0, "per_cluster": 40.0},
    "goal": {"moe": 6.0, "budget": 900.0},
}


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from a PNG's IHDR chunk (PNG specification, ISO/IEC 15948, sec. 11.2.2)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG signature"
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    crc = struct.unpack(">I", data[29:33])[0]
    assert crc == zlib.crc32(data[12:29]) & 0xFFFFFFFF, "IHDR checksum does not match"
    return struct.unpack(">II", data[16:24])


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.imgs, self.tags, self.refs = set(), [], [], []
        self.rows_in_summary = 0
        self._section = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "section":
            self._section = a.get("id")
        if tag == "img":
            self.imgs.append(a)
        for key in ("src", "href"):
            if key in a:
                self.refs.append(a[key])
        if tag == "tr" and self._section == "summary":
            self.rows_in_summary += 1


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    res = samplewright.run(samplewright.scenario_from_dict(SCENARIO))
    out = tmp_path_factory.mktemp("report") / "run"
    res.write(out, report=True)
    return out, res


@pytest.mark.slow
def test_every_figure_is_a_png_of_the_promised_size(run_dir):
    out, res = run_dir
    assert set(res.figure_names()) == EXPECTED_FIGURES
    files = {p.stem: p for p in (out / "figures").glob("*.png")}
    assert set(files) == EXPECTED_FIGURES
    for name, path in files.items():
        data = path.read_bytes()
        w, h = png_size(data)
        fig = res.figure(name)
        fw, fh = fig.get_size_inches() * F.DPI
        assert (w, h) == (round(fw), round(fh)), name
        assert w == round(F.FIG_WIDTH * F.DPI) == 975  # A4 text width at 150 dpi
        assert 300 <= h <= 2400, name
        import matplotlib.image as mpimg

        px = mpimg.imread(io.BytesIO(data))[..., :3]
        non_white = np.mean(px.min(axis=2) < 0.95)
        assert non_white > 0.01, f"{name} is nearly blank ({non_white:.3%} ink)"
        assert len(np.unique((px * 255).astype(np.uint8).reshape(-1, 3), axis=0)) > 20, name


def test_one_colour_per_design_in_every_figure(run_dir):
    _, res = run_dir
    # Okabe-Ito hex values (Okabe & Ito 2008, "Color Universal Design"; from memory)
    okabe_ito = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#000000"}
    assert set(F.PALETTE[:7]) <= okabe_ito
    colours = F.design_colours(F.design_order(res.summary))
    assert len(set(colours.values())) == len(colours) == 4
    from matplotlib.colors import to_hex

    for name in ("bias", "coverage", "se_check"):
        fig = res.figure(name)
        used = {to_hex(c).upper() for ax in fig.axes for line in ax.get_lines() for c in [line.get_color()]}
        used |= {
            to_hex(c).upper() for ax in fig.axes for coll in ax.collections for c in coll.get_edgecolor()
        }
        for d, c in colours.items():
            assert c.upper() in used, f"{d}'s colour {c} missing from {name}"


def test_plot_functions_draw_on_a_given_axes_without_pyplot(run_dir):
    _, res = run_dir
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    fig = F.new_figure(3.0)
    ax = fig.add_subplot()
    assert F.coverage_plot(res.summary, 0.95, ax=ax) is ax
    assert F.bias_plot(res.summary, ax=ax) is ax
    # the faceted figures (a panel per design) draw into a given Figure
    panels = F.new_figure(6.0)
    assert F.sampling_distribution(res.replicates, res.summary, fig=panels) is panels
    panels = F.new_figure(6.0)
    assert F.allocation_plot(res.allocation, res.summary, fig=panels) is panels
    assert plt.get_fignums() == before  # no pyplot figure was opened


def test_ranked_intervals_put_every_hit_before_every_miss(run_dir):
    # Morris, White & Crowther (2019), sec. 6 / Fig. 4: ranked by |estimate - truth| / SE, the
    # intervals estimate +- t SE that hold the truth come first, the misses last.
    _, res = run_dir
    truth = float(res.summary["truth"].iloc[0])
    for _key, g in res.replicates.groupby(["design", "size", "estimator"]):
        order = F.zip_order(g["estimate"], g["se"], truth)
        cover = ((g["lower"] <= truth) & (truth <= g["upper"])).to_numpy()[order]
        k = int(cover.sum())
        assert cover[:k].all() and not cover[k:].any()


def test_html_parses_has_every_section_and_embeds_every_figure(run_dir):
    out, res = run_dir
    text = (out / "report.html").read_text(encoding="utf-8")
    page = _Page()
    page.feed(text)
    page.close()
    assert SECTIONS <= page.ids
    assert "script" not in page.tags and "link" not in page.tags
    assert all(not r.startswith(("http:", "https:", "//", "file:")) for r in page.refs), page.refs
    embedded = []
    for img in page.imgs:
        src = img["src"]
        assert src.startswith("data:image/png;base64,")
        embedded.append(base64.b64decode(src.split(",", 1)[1]))
        assert img.get("alt")
    on_disk = sorted(p.read_bytes() for p in (out / "figures").glob("*.png"))
    assert sorted(embedded) == on_disk  # every figure, byte for byte
    # one summary row per design x size x estimator x variable, plus the header row
    assert page.rows_in_summary == len(res.summary) + 1
    for needed in ("Root seed", "99", "Versions", "qualified statistician", res.info["scenario_hash"]):
        assert needed in text, needed


def test_brief_tells_the_story_on_one_page(run_dir):
    out, res = run_dir
    brief = (out / "brief.md").read_text(encoding="utf-8")
    assert brief.startswith("<!-- samplewright")
    assert "# Depot tyre-wear audit (test)" in brief
    evidence = brief.split("**Evidence**", 1)[1].split("\n\n", 2)[1]  # the table after the heading line
    table = [
        ln for ln in evidence.splitlines() if ln.startswith("| ") and not ln.startswith(("| Design", "| ---"))
    ]
    cells = res.summary[["design", "size"]].drop_duplicates()
    assert len(table) == len(cells)
    # the verdict card comes first: the sentence, then the key numbers, then the chart
    assert brief.index("**Verdict.**") < brief.index("![") < brief.index("| Design")
    assert "--seed 99 --replicates 300" not in brief  # a scenario built in Python has no file to re-run
    assert "samplewright.run(scenario, replicates=300, seed=99)" in brief
    assert "qualified statistician" in brief
    assert len(brief.splitlines()) < 75


@pytest.mark.slow
def test_report_command_rebuilds_without_simulating(run_dir, tmp_path, monkeypatch, capsys):
    out, _ = run_dir
    before = {p.name: p.read_bytes() for p in (out / "figures").glob("*.png")}
    reps_mtime = (out / "replicates.parquet").stat().st_mtime_ns

    def no_simulation(*_a, **_k):
        raise AssertionError("report must not simulate")

    import samplewright.api
    import samplewright.simulation.engine

    monkeypatch.setattr(samplewright.api, "run", no_simulation)
    monkeypatch.setattr(samplewright.simulation.engine, "simulate", no_simulation)
    for p in (out / "figures").glob("*.png"):
        p.unlink()
    (out / "report.html").unlink()
    assert cli.main(["report", str(out), "--svg"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[-1] == f"report: {(out / 'report.html').resolve()}"
    after = {p.name: p.read_bytes() for p in (out / "figures").glob("*.png")}
    assert after == before  # drawn from the tables on disk, the same as from the run in memory
    assert {p.stem for p in (out / "figures").glob("*.svg")} == EXPECTED_FIGURES
    assert (out / "replicates.parquet").stat().st_mtime_ns == reps_mtime


def test_report_refuses_a_foreign_report_without_force(run_dir, tmp_path, capsys):
    _, res = run_dir
    other = tmp_path / "copy"
    res.write(other)
    (other / "report.html").write_text("<html>my own notes</html>", encoding="utf-8")
    assert cli.main(["report", str(other)]) == 2
    assert "report.html exists and was not written by samplewright" in capsys.readouterr().err
    assert (other / "report.html").read_text(encoding="utf-8") == "<html>my own notes</html>"
    assert cli.main(["report", str(other), "--force", "--quiet"]) == 0
    assert "samplewright" in (other / "report.html").read_text(encoding="utf-8")


def test_report_of_a_folder_that_is_not_a_run(tmp_path, capsys):
    assert cli.main(["report", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "run.json is missing" in err
    assert cli.main(["report", str(tmp_path / "nowhere")]) == 2


def test_report_without_the_replicate_table(run_dir, tmp_path):
    _, res = run_dir
    d = res.write(tmp_path / "slim")
    (d / "replicates.parquet").unlink()
    page = samplewright.write_report(samplewright.read_run(d), d)
    text = page.read_text(encoding="utf-8")
    assert "replicates.parquet is missing" in text
    assert {p.stem for p in (d / "figures").glob("*.png")} == EXPECTED_FIGURES - {
        "sampling_distribution",
        "intervals",
    }


def test_recommendation_and_goals_are_shown_when_the_run_has_them(run_dir):
    out, res = run_dir
    rec = res.recommendation
    assert rec is not None and res.frontier is not None and (out / "recommendation.json").exists()
    text = (out / "report.html").read_text(encoding="utf-8")
    from markupsafe import escape  # the escaping Jinja2 applies

    assert escape(rec["statement"]) in text
    for key in ("cheapest_meeting_moe", "best_within_budget"):
        if rec[key] is not None:
            assert f'<td>{escape(rec[key]["design"])}</td><td class="num">{rec[key]["size"]}</td>' in text
    assert f"why it was passed over ({len(rec['passed_over'])})" in text
    under = {p["design"] for p in rec["passed_over"] if "under-cover" in p["reason"]}
    for d in under:
        assert f"Passed over because its intervals under-cover: <strong>{escape(d)}</strong>" in text
    back = samplewright.read_run(out)
    assert F.goals_of(back) == {"moe": 6.0, "budget": 900.0}
    assert F.goals_of(back, "another variable") == {}
    ax = F.cost_precision_plot(back.summary, back.frontier, F.goals_of(back), picks=F.picks_of(back))
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "budget 900" in labels and "target margin of error 6" in labels
    assert "frontier (best for the cost)" in labels
    brief = (out / "brief.md").read_text(encoding="utf-8")
    assert "**Verdict.** " + rec["statement"] in brief


def test_numbers_are_rounded_to_their_monte_carlo_error():
    # common practice: report an estimate to the precision its MCSE supports (two significant
    # figures of the MCSE), as Morris, White & Crowther (2019, sec. 5.2) recommend showing MCSEs
    assert with_mcse(-0.11486, 0.10769) == "-0.11 (0.11)"
    assert with_mcse(0.9425, 0.005205, scale=100) == "94.25 (0.52)"
    assert with_mcse(12.3456, 2.1) == "12.3 (2.1)"
    assert with_mcse(float("nan"), 0.1) == "n/a"
    # the description rule (findings.COVERAGE_Z = 3 MCSEs): 0.93 < 0.95 - 3 * 0.005 = 0.935
    assert coverage_verdict(0.93, 0.005, 0.95) == "low"
    assert coverage_verdict(0.94, 0.005, 0.95) == "ok"
    assert coverage_verdict(0.999, 0.0007, 0.95) == "high"


@pytest.mark.slow
def test_two_study_variables_get_their_own_figures(tmp_path):
    rng = np.random.default_rng(3)
    df = pd.DataFrame(
        {
            "weight": rng.gamma(4.0, 2.0, 600),
            "length": rng.normal(30, 4, 600),
            "pen": np.repeat(["a", "b", "c"], 200),
        }
    )
    df.to_csv(tmp_path / "frame.csv", index=False)
    sc = samplewright.scenario_from_dict(
        {
            "frame": {"path": "frame.csv", "target": ["weight", "length"], "stratum": "pen"},
            "design": [
                {"label": "srs", "method": "srs", "n": 40},
                {"label": "by pen", "method": "stratified", "n": 40, "allocation": "proportional"},
            ],
        },
        base=tmp_path,
    )
    res = samplewright.run(sc, replicates=100, seed=4)
    d = res.write(tmp_path / "out", report=True)
    stems = {p.stem for p in (d / "figures").glob("*.png")}
    assert {"coverage", "coverage-length", "intervals", "intervals-length", "allocation"} <= stems
    assert "allocation-length" not in stems
    assert res.figure("bias", variable="length").axes[0].get_title(loc="left").endswith("length")
    assert res.recommendation is None
    text = (d / "report.html").read_text(encoding="utf-8")
    assert "<h2>What the rehearsal shows</h2>" in text and "makes no recommendation" in text


def test_a_cycle_along_the_list_gets_its_figure(tmp_path):
    # invented hourly counts with a 24-hour cycle; k = 2400 / 100 = 24 lands on one phase
    sc = samplewright.scenario_from_dict(
        {
            "frame": {
                "synthetic": {
                    "units": 2400,
                    "seed": 2,
                    "target": "walkers",
                    "mean": 100,
                    "sd": 10,
                    "period": 24,
                    "amplitude": 40,
                },
                "target": "walkers",
            },
            "design": [
                {"label": "srs", "method": "srs", "n": 100},
                {"label": "every 24th hour", "method": "systematic", "n": 100},
            ],
        }
    )
    res = samplewright.run(sc, replicates=100, seed=1)
    entry = res.info["frame_order"][0]
    assert abs(entry["periods"][0]["period"] - 24) < 0.5 and 24 in entry["unsafe_intervals"]
    d = res.write(tmp_path / "cyc", report=True)
    assert (d / "frame_order.csv").exists()
    back = samplewright.read_run(d)
    assert "frame_order" in back.figure_names()
    ax = back.figure("frame_order").axes[0]
    marked = [ln for ln in ax.get_lines() if ln.get_label().startswith("every 24th hour")]
    assert len(marked) == 1
    xs = marked[0].get_xdata()
    assert np.all(np.diff(xs) == 24)  # every 24th unit: one phase of the cycle
    assert entry["walks"] == [{"design": "every 24th hour", "size": 100, "interval": 24.0, "starts": 1}]
    w, h = png_size((d / "figures" / "frame_order.png").read_bytes())
    assert w == 975 and h > 300
    # a run without a systematic design keeps no frame-order table
    plain = samplewright.run(
        samplewright.scenario_from_dict({**sc.raw, "design": sc.raw["design"][:1]}), replicates=50, seed=1
    )
    assert plain.frame_order is None and "frame_order" not in plain.figure_names()


def test_figure_names_are_checked():
    res = samplewright.RunResult(
        summary=pd.DataFrame(), replicates=pd.DataFrame(), allocation=pd.DataFrame(), info={}
    )
    with pytest.raises(KeyError, match="did you mean 'coverage'"):
        res.figure("coverag")


@pytest.mark.slow
def test_run_and_demo_write_the_report_and_no_report_skips_it(demo_run, tmp_path):
    # the shared finished demo run (conftest.demo_run) wrote its report and said where
    assert demo_run.returncode == 0, demo_run.stderr
    out = demo_run.stdout.strip().splitlines()
    page = (demo_run.out / "report.html").resolve()
    assert out[-1] == f"report: {page}" and page.exists()
    assert (demo_run.out / "brief.md").exists()
    assert (
        cli.main(["demo", "--out", str(tmp_path / "bare"), "--replicates", "100", "--no-report", "--quiet"])
        == 0
    )
    assert not (tmp_path / "bare" / "report.html").exists()
    assert not (tmp_path / "bare" / "figures").exists()
    assert json.loads((tmp_path / "bare" / "run.json").read_text())["replicates"] == 100


def test_public_api_surface():
    # the promised names, exactly: a name added to or dropped from __all__ must be added here too
    names = {"load_scenario", "run", "draw", "propose", "scenario_from_dict", "Scenario", "RunResult", "read_run",
             "write_report", "Frame", "InputError", "__version__"}
    assert set(samplewright.__all__) == names
    for name in names - {"__version__"}:
        obj = getattr(samplewright, name)
        # each name resolves (lazily or not) to the package's own object of that name, not a stand-in
        assert obj.__name__ == name and obj.__module__.startswith("samplewright."), (name, obj)
        assert callable(obj), name
    assert issubclass(samplewright.InputError, Exception)
    # the version matches the installed distribution's metadata (PEP 566)
    assert samplewright.__version__ == importlib.metadata.version("samplewright")
    with pytest.raises(AttributeError):
        samplewright.no_such_thing  # noqa: B018
