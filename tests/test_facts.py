"""The facts table is the one description of the per-object facts: README, default bins and --by help follow it."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from synthgen.evaluate import slices as score
from synthgen.scene import facts

README = Path(__file__).resolve().parent.parent / "README.md"


def test_readme_facts_table_is_the_rendered_table():
    """The README's facts table equals what synthgen.scene.facts renders (edit FACTS, then paste facts_table())."""
    text = README.read_text(encoding="utf-8")
    start = text.index("| fact | type | unit |")
    assert text[start : start + len(facts.facts_table())] == facts.facts_table()


def test_every_recorded_fact_is_in_the_table(synth_scene):
    """Every key a scene records under "synthgen" has an entry in FACTS, and every entry is recorded somewhere."""
    recorded = {key for f in synth_scene.facts for key in f}
    listed = {f.name for f in facts.FACTS if f.recorded}
    optional = {"ignored", "visible_box"}  # on ignore regions only / objects only
    dial_facts = {"pair_id", "pair_iou", "occlusion_id", "occlusion_goal", "occluder_hides", "occluder"}
    dial_facts |= {"grid_row", "grid_col", "cluster"}
    assert recorded - dial_facts <= listed
    assert listed - optional <= recorded


def test_score_uses_the_table_bins():
    """score's default edges are the table's, and the edges rise."""
    assert score.DEFAULT_EDGES is facts.DEFAULT_EDGES
    for edges in facts.DEFAULT_EDGES.values():
        assert np.all(np.diff(edges) > 0)


def test_by_help_lists_every_slice_fact():
    """The --by help names every fact the table marks as sliceable."""
    from typer.main import get_command

    from synthgen.cli import app

    score_cmd = get_command(app).commands["score"]
    help_text = next(p.help for p in score_cmd.params if p.name == "by")
    for name in facts.slice_facts():
        assert name in help_text


def test_report_statistics_read_facts_of_the_table():
    """The facts the dataset statistics read are FACTS entries of the type they treat them as."""
    from synthgen.report import stats

    assert (stats.VISIBLE.name, stats.VISIBLE.type) == ("visible_fraction", "numeric")
    assert (stats.TRUNCATED.name, stats.TRUNCATED.type) == ("truncated", "categorical")
    assert (stats.MAX_IOU.name, stats.MAX_IOU.type) == ("max_iou", "numeric")
    for fact in (stats.VISIBLE, stats.TRUNCATED, stats.MAX_IOU):
        assert facts.FACTS_BY_NAME[fact.name] is fact
