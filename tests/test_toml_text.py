"""config/toml_text.py: written TOML reads back (tomllib, the standard library's TOML reader) to the same dict."""

import tomllib

from samplewright.config.toml_text import toml_text


def test_round_trip_of_a_scenario_like_document():
    doc = {"title": 'quote " back\\slash\nnew line é\ttab \x7f del \x00 nul', "seed": 7, "replicates": 100,
           "frame": {"path": "a b.csv", "target": ["y", "z"],
                     "synthetic": {"units": 10, "strata": [{"name": "a", "share": 0.5}, {"name": "b", "share": 0.5}]}},
           "cost": {"fixed": 1.5, "per_unit_by_stratum": {"north": 2.0, "odd key!": 3.0, "del\x7fkey": 1.0}},
           "design": [{"label": "x", "method": "stratified", "n": [10, 20], "boundaries": [1e-7, 2.5, 1e12],
                       "take_all": True}, {"label": "y", "method": "srs", "n": 5}],
           "goal": {"budget": 1000.0}}
    text = toml_text(doc, comments={"": ["top"], "[[design]] 2": ["second"]})
    assert tomllib.loads(text) == doc
    assert text.startswith("# top\n") and "# second\n[[design]]" in text
