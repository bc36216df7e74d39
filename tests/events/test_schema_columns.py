"""One schema: every column aspectus writes is defined once, with its unit, and documented where users read."""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus import schema
from aspectus.events.analysis import run_analysis

REPO = Path(__file__).resolve().parents[2]
SCOPE = {"scope", "label", "start_s", "end_s", "n_samples"}


def _samples(n=600, rate=30.0):
    t = np.arange(n) / rate
    rng = np.random.default_rng(0)
    yaw = np.repeat(rng.uniform(-10, 10, n // 15 + 1), 15)[:n] + rng.normal(0, 0.2, n)
    pitch = np.repeat(rng.uniform(-5, 5, n // 15 + 1), 15)[:n] + rng.normal(0, 0.2, n)
    return pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": yaw, "pitch_deg": pitch})


def test_every_feature_column_written_is_defined_in_the_schema():
    res = run_analysis(_samples())
    written = set(res.features.columns) - SCOPE
    defined = {c.name for c in schema.FEATURE_COLUMNS}
    assert written == defined, (written - defined, defined - written)


def test_every_column_has_a_unit_in_its_name_or_is_a_count_and_a_definition():
    for c in (*schema.SAMPLE_COLUMNS, *schema.EVENT_COLUMNS, *schema.FEATURE_COLUMNS):
        assert c.doc.strip(), c.name
        assert c.human and "_" not in c.human, (c.name, c.human)
    for c in schema.FEATURE_COLUMNS:
        unit_named = re.search(r"_(ms|s|deg|per_s|per_min|frac)$", c.name)
        assert unit_named or c.name.endswith("_count"), f"{c.name}: a unit or _count in the name"


def test_readme_lists_every_feature_column_with_its_unit():
    readme = (REPO / "README.md").read_text()
    table = readme.split("### The features table", 1)[1].split("\n## ", 1)[0]
    for c in schema.FEATURE_COLUMNS:
        row = next((line for line in table.splitlines() if line.startswith(f"| `{c.name}` |")), None)
        assert row is not None, f"README's features table lacks {c.name}"
        unit = c.unit if c.unit not in ("", "1") else "-"
        assert f"| {unit} |" in row, (c.name, row)


def test_human_labels_carry_units():
    assert schema.human_label("fixation_duration_mean_ms") == "Fixation duration, mean (ms)"
    assert schema.human_label("yaw_deg").endswith("(deg)")
    assert schema.human_label("not_a_column_ms") == "Not a column"
