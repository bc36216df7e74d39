"""bench/_bench_args.py: the benchmarks read --gaze NAME=VALUE as `aspectus process --gaze` does."""
from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))

import _bench_args as A  # noqa: E402

from aspectus.errors import ParameterError  # noqa: E402


def test_values_are_typed_as_the_gaze_settings_are():
    over = A.gaze_overrides(["side_arcs=false", "iris_combine=limbus", "blink_pad_ms=50"])
    assert over == {"side_arcs": False, "iris_combine": "limbus", "blink_pad_ms": 50.0}
    assert A.gaze_overrides([]) == {}


@pytest.mark.parametrize("item, words", [("side_arcs", "NAME=VALUE"), ("sidearcs=true", "did you mean side_arcs"),
                                         ("side_arcs=maybe", "true or false")])
def test_a_bad_item_is_refused_with_what_to_write(item, words, capsys):
    with pytest.raises(ParameterError, match=words):
        A.gaze_overrides([item])
    assert A.gaze_overrides_or_exit_code([item]) == 2
    assert words in capsys.readouterr().err


def test_only_picks_named_items_and_refuses_unknown_names(capsys):
    class Cell:
        def __init__(self, name):
            self.name = name

    cells = [Cell("12px_crf28"), Cell("25px_crf28")]
    assert [c.name for c in A.only_named(cells, ["25px_crf28"], "cell")] == ["25px_crf28"]
    assert A.only_named(cells, None, "cell") == cells
    assert A.only_named(cells, ["16px"], "cell") == 2
    err = capsys.readouterr().err
    assert "no cell named 16px" in err and "12px_crf28, 25px_crf28" in err
