"""The Examples sections of the library's docstrings, run by doctest (numpydoc style, as the docs show them).

Every module of ``aspectus`` is searched; each module's examples run in their own namespace, with a few
names the examples may use: ``sample_clips`` (the repository's demo clips folder), ``tmp`` (a fresh
folder), and ``batch_folder`` (a batch output folder of two constructed clips, made without the face mesh
by ``tests/_results.py``).
"""
from __future__ import annotations

import doctest
import importlib
import pkgutil
from pathlib import Path

import pytest
from _results import write_batch_folder

import aspectus

REPO = Path(__file__).resolve().parents[1]
FLAGS = doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE


def _modules() -> list[str]:
    names = [m.name for m in pkgutil.walk_packages(aspectus.__path__, "aspectus.")]
    return sorted(n for n in names if not n.endswith("__main__"))


def _with_examples() -> list[str]:
    out = []
    finder = doctest.DocTestFinder(exclude_empty=True)
    for name in _modules():
        mod = importlib.import_module(name)
        if any(t.examples for t in finder.find(mod, name)):
            out.append(name)
    return out


#: modules whose examples run the face mesh or render a clip (seconds each): marked slow
SLOW = {"aspectus.webcam.pipeline", "aspectus.studies.batch", "aspectus.synth.render"}
MODULES = [pytest.param(n, marks=pytest.mark.slow) if n in SLOW else n for n in _with_examples()]


@pytest.fixture(scope="module")
def batch_folder(tmp_path_factory):
    return write_batch_folder(tmp_path_factory.mktemp("doctest_batch"), {
        "linden_brook_p01_s01": {"participant": "p01", "session": "s01", "seed": 1},
        "linden_brook_p02_s01": {"participant": "p02", "session": "s01", "seed": 2}})


def test_the_public_functions_carry_examples():
    """Every function of the public API (``aspectus.__all__``) and a few more each have an Examples section."""
    import inspect

    from aspectus.reference.bids import read_bids_physio
    from aspectus.studies.batch import plan_batch
    from aspectus.validation.agreement import bland_altman, icc, pearson

    public = [getattr(aspectus, n) for n in aspectus.__all__ if inspect.isfunction(getattr(aspectus, n))]
    assert len(public) >= 10
    missing = [fn.__qualname__ for fn in (*public, read_bids_physio, plan_batch, bland_altman, icc, pearson)
               if "\n    Examples\n    --------\n" not in (fn.__doc__ or "")]
    assert not missing, f"no Examples section: {', '.join(missing)}"


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name, tmp_path, batch_folder, monkeypatch):
    monkeypatch.chdir(tmp_path)
    mod = importlib.import_module(name)
    extras = {"sample_clips": REPO / "sample_clips", "tmp": tmp_path, "batch_folder": batch_folder}
    runner = doctest.DocTestRunner(optionflags=FLAGS)
    finder = doctest.DocTestFinder(exclude_empty=True)
    for test in finder.find(mod, name, globs={**vars(mod), **extras}):
        runner.run(test)
    res = runner.summarize(verbose=False)
    assert res.failed == 0, f"{res.failed} of {res.attempted} examples in {name} failed (output above)"
