"""Study validation from two folders: pairing by names, everything left over reported, ambiguity refused,
the pairing written as a manifest; the study's repeated-measures figures.

The pairing tests use empty stand-in files (pairing reads only names,
status.csv and run.json). The end-to-end test makes webcam samples tables
from known gaze trajectories (as tests/validation/test_validate.py does) and simulated
lab recordings in a BIDS tree, so no face mesh runs.
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from aspectus.validation.agreement import bland_altman_repeated, rmcorr
from aspectus.cli import main
from aspectus.errors import AspectusInputError
from aspectus.validation.pairing import bids_labels, pair_folders
from aspectus.synth.lab_recording import write_demo_reference
from aspectus.synth.trajectory import synth_trajectory
from aspectus.validation.pair import ValidateParams
from aspectus.validation.manifest import read_validation_manifest
from aspectus.validation.study import validate_study

PATTERN = r"(?P<participant>p\d+)_(?P<session>s\d+)"


def _clip(root, key, *, clip=None):
    d = root / key
    d.mkdir(parents=True)
    (d / "samples.parquet").write_bytes(b"")
    if clip:
        (d / "run.json").write_text(json.dumps({"clip": clip}))
    return d


def _ref(root, rel):
    p = root / rel
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_bytes(b"")
    return p


def test_bids_labels_from_names_and_folders():
    assert bids_labels("sub-p01/ses-s02/sub-p01_ses-s02_task-reading_run-1_recording-eye1_physio.tsv.gz") == {
        "participant": "p01", "session": "s02", "task": "reading", "run": "1"}
    assert bids_labels("sub-p01/ses-s02/eye_physio.tsv.gz") == {"participant": "p01", "session": "s02"}
    assert bids_labels("linden_brook_p01_s01") == {}
    with pytest.raises(AspectusInputError, match="folder says sub-p01 but its name says sub-p02.*manifest"):
        bids_labels("sub-p01/sub-p02_physio.tsv.gz", source="x")


def test_pairing_by_labels_stems_and_what_is_left_over(tmp_path):
    cams, refs = tmp_path / "results", tmp_path / "lab"
    # a batch output: labels in status.csv, one clip failed, one still pending
    _clip(cams, "classA__kid1")
    _clip(cams, "classA__kid2")
    _clip(cams, "sub-p03_ses-s01_task-reading")                      # BIDS entities in the folder name
    _clip(cams, "morning_take", clip="/data/sub-p04/ses-s02/take.mp4")  # ... or in the original clip's path
    _clip(cams, "p05_extra")                                         # plain name: identical stem below
    _clip(cams, "p06_s01")                                           # plain name, nothing to pair with
    (cams / ".batch").mkdir()
    pd.DataFrame({"clip": ["a/kid1.mp4", "a/kid2.mp4", "a/kid3.mp4", "a/kid4.mp4"],
                  "key": ["classA__kid1", "classA__kid2", "classA__kid3", "classA__kid4"],
                  "status": ["done", "done", "failed", "pending"], "reason": ["", "", "no face found", ""],
                  "participant": ["p01", "p02", "p07", "p08"], "session": ["s01", "s01", "s01", "s01"]}
                 ).to_csv(cams / "status.csv", index=False)
    _ref(refs, "sub-p01/ses-s01/sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    _ref(refs, "sub-p01/ses-s01/sub-p01_ses-s01_task-reading_recording-eye1_physioevents.tsv.gz")
    _ref(refs, "sub-p01/ses-s01/sub-p01_ses-s01_task-reading_events.json")
    _ref(refs, "sub-p02/ses-s01/sub-p02_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    _ref(refs, "sub-p02/ses-s02/sub-p02_ses-s02_task-reading_recording-eye1_physio.tsv.gz")  # no such clip
    _ref(refs, "sub-p03/ses-s01/sub-p03_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    _ref(refs, "sub-p04/ses-s02/sub-p04_ses-s02_task-reading_recording-eye1_physio.tsv.gz")
    _ref(refs, "derivatives/sub-p01/ses-s01/sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    _ref(refs, "participants.tsv")
    _ref(refs, "tables/p05_extra.csv")
    pairing = pair_folders(cams, refs)
    got = {p.clip.key: (p.reference.rel, p.matched_on) for p in pairing.pairs}
    assert got == {
        "classA__kid1": ("sub-p01/ses-s01/sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz",
                         "labels: participant, session"),
        "classA__kid2": ("sub-p02/ses-s01/sub-p02_ses-s01_task-reading_recording-eye1_physio.tsv.gz",
                         "labels: participant, session"),
        "sub-p03_ses-s01_task-reading": ("sub-p03/ses-s01/sub-p03_ses-s01_task-reading_recording-eye1_physio.tsv.gz",
                                         "labels: participant, session, task"),
        "morning_take": ("sub-p04/ses-s02/sub-p04_ses-s02_task-reading_recording-eye1_physio.tsv.gz",
                         "labels: participant, session"),
    }
    assert [p.clip.label_source for p in pairing.pairs] == ["status.csv", "status.csv", "BIDS names", "BIDS names"]
    msgs = "\n".join(pairing.messages())
    # every clip without a reference, reference without a clip, unprocessed clip and unused file is listed
    assert "clip p05_extra: no reference" in msgs and "clip p06_s01: no reference" in msgs
    assert "--labels REGEX" in msgs
    assert "sub-p02_ses-s02_task-reading_recording-eye1_physio.tsv.gz: no clip (no processed clip with " \
           "participant p02, session s02, task reading)" in msgs
    assert "clip classA__kid3: not processed (failed: no face found in status.csv)" in msgs
    assert "clip classA__kid4: not processed (pending in status.csv)" in msgs
    assert "p05_extra.csv: not used (a plain table: give --mapping FILE" in msgs
    # files are named relative to their folder: the console and the report carry no absolute path (user names)
    assert str(tmp_path) not in msgs
    assert "derivatives" not in msgs and "participants.tsv" not in msgs and "physioevents" not in msgs
    table = pairing.table()
    assert table["status"].value_counts().to_dict() == {"paired": 4, "no reference": 2, "no clip": 1,
                                                        "not processed": 2, "not used": 1}
    # with a mapping plain tables count, and identical stems pair them
    pairing = pair_folders(cams, refs, tables=True)
    assert {p.clip.key: p.matched_on for p in pairing.pairs}["p05_extra"] == "identical stem"
    # a label pattern gives the plain names labels
    _ref(refs, "sub-p06/sub-p06_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    pairing = pair_folders(cams, refs, label_pattern=PATTERN)
    p6 = [p for p in pairing.pairs if p.clip.key == "p06_s01"][0]
    assert p6.clip.labels == {"participant": "p06", "session": "s01"} and p6.clip.label_source == "--labels"
    rows = {r.key: r for r in pairing.rows()}
    assert rows["p06_s01_reading"].reference == p6.reference.path
    assert rows["p03_s01_reading"].task == "reading"


def test_ambiguous_pairings_are_refused_and_written_as_choices(tmp_path):
    cams, refs = tmp_path / "out", tmp_path / "lab"
    _clip(cams, "sub-p01")                  # no session label
    _clip(cams, "sub-p02_ses-s01")
    a = _ref(refs, "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    b = _ref(refs, "sub-p01_ses-s02_task-reading_recording-eye1_physio.tsv.gz")
    _ref(refs, "sub-p02_ses-s01_task-reading_recording-eye1_physio.tsv.gz")
    pairing = pair_folders(cams, refs)
    assert [p.clip.key for p in pairing.pairs] == ["sub-p02_ses-s01"]
    with pytest.raises(AspectusInputError) as exc:
        pairing.raise_if_ambiguous()
    msg = str(exc.value)
    assert "ambiguous pairing" in msg and str(a) in msg and str(b) in msg and "--manifest" in msg
    assert "sub-p01" in msg  # the clip folder it is about
    # the library refuses it too, and with save_manifest writes the choices as comments
    man = tmp_path / "pairs.csv"
    with pytest.raises(AspectusInputError, match="draft manifest .* was written to .*pairs.csv"):
        validate_study(cams, tmp_path / "study", references=refs, save_manifest=man)
    assert not (tmp_path / "study").exists()
    text = man.read_text()
    assert text.count("\n#") == 4 and "fits two references equally well" in text
    assert [r.key for r in read_validation_manifest(man)] == ["p02_s01_reading"]
    # keep one of the choices: it is read like any other row
    lines = text.splitlines()
    keep = [ln for ln in lines if ln.startswith("#") and "ses-s02" in ln][0]
    man.write_text("\n".join([ln for ln in lines if not ln.startswith("#")] + [keep[1:]]) + "\n")
    assert sorted(r.key for r in read_validation_manifest(man)) == ["p01_s02_reading", "p02_s01_reading"]
    # two clip folders for one reference
    _clip(cams, "sub-p02_ses-s01_take2")
    with pytest.raises(AspectusInputError, match=r"fits two clip folders: .*sub-p02_ses-s01 and .*sub-p02_ses-s01_take2"):
        pair_folders(cams, refs).raise_if_ambiguous()
    # --reference-glob narrows the references
    pairing = pair_folders(cams, refs, reference_glob="*ses-s01*")
    assert b in [p for p, _ in pairing.ignored]


def test_folder_errors_name_the_file_and_what_to_do(tmp_path):
    refs = tmp_path / "lab"
    _ref(refs, "sub-p01_physio.tsv.gz")
    one = _clip(tmp_path / "out", "p01")
    with pytest.raises(AspectusInputError, match=r"out/p01: is the output folder of one clip.*folder above it"):
        pair_folders(one, refs)
    (tmp_path / "empty").mkdir()
    with pytest.raises(AspectusInputError, match=r"empty: no processed clips here.*aspectus batch"):
        pair_folders(tmp_path / "empty", refs)
    with pytest.raises(AspectusInputError, match=r"empty: no reference recordings here.*--mapping"):
        pair_folders(tmp_path / "out", tmp_path / "empty")
    with pytest.raises(AspectusInputError, match="no clip could be paired.*--labels REGEX"):
        validate_study(tmp_path / "out", tmp_path / "study", references=refs)
    with pytest.raises(AspectusInputError, match="folder mode needs the reference folder too"):
        validate_study(tmp_path / "out", tmp_path / "study")


# ----------------------------------------------------------------------------- end to end


def _webcam(folder, truth, *, seed, bias=(4.0, -3.0)):
    rng = np.random.default_rng(seed)
    t = np.arange(0, truth["t_s"].iloc[-1], 1 / 30)
    blink = np.interp(t, truth["t_s"], truth["blink"].astype(float)) > 0.5
    yaw = np.interp(t, truth["t_s"], truth["yaw_deg"]) * 1.1 + bias[0] + rng.normal(0, 0.4, len(t))
    pitch = np.interp(t, truth["t_s"], truth["pitch_deg"]) * 0.9 + bias[1] + rng.normal(0, 0.4, len(t))
    folder.mkdir(parents=True)
    pd.DataFrame({"t_s": t, "valid": ~blink, "yaw_deg": np.where(blink, np.nan, yaw),
                  "pitch_deg": np.where(blink, np.nan, pitch), "blink": blink}).to_parquet(folder / "samples.parquet")


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """Linden Brook pilot, invented: p01 twice, p02, p03; a reference of p04 without a clip, a clip of p05 without."""
    root = tmp_path_factory.mktemp("linden_brook_study")
    cams, bids = root / "results", root / "lab"
    for k, (sub, ses) in enumerate([("p01", "s01"), ("p01", "s02"), ("p02", "s01"), ("p03", "s01"), ("p04", "s01"),
                                    ("p05", "s01")]):
        truth = synth_trajectory(duration_s=21.0, seed=20 + k, task="reading").samples
        if sub != "p05":
            write_demo_reference(truth, bids / f"sub-{sub}" / f"ses-{ses}", stem=f"{sub}_{ses}",
                                 offset_s=-0.5 - 0.25 * k, rate_hz=250.0, seed=k)
        if sub != "p04":
            _webcam(cams / f"linden_brook_{sub}_{ses}", truth, seed=k)
    return {"root": root, "cams": cams, "bids": bids}


def _params():
    from aspectus.events.analysis import AnalysisParams

    return ValidateParams(analysis=AnalysisParams(detector="i2mc", window_s=5.0, step_s=5.0))


def test_folder_study_end_to_end(study, tmp_path):
    out = tmp_path / "study"
    res = validate_study(study["cams"], out, references=study["bids"], label_pattern=PATTERN, params=_params(),
                         figures=False, save_manifest=tmp_path / "pairs.csv")
    assert set(res.results) == {"p01_s01_reading", "p01_s02_reading", "p02_s01_reading", "p03_s01_reading"}
    assert not res.failures
    # left over on both sides: reported in the result, pairing.csv and participants.csv
    assert any(m.startswith("clip linden_brook_p05_s01: no reference") for m in res.unpaired)
    assert any("sub-p04_ses-s01" in m and "no clip" in m for m in res.unpaired)
    pairing = pd.read_csv(out / "pairing.csv")
    assert pairing["status"].value_counts().to_dict() == {"paired": 4, "no reference": 1, "no clip": 1,
                                                        "not used": 5}  # the plain CSV copies, no --mapping
    per = pd.read_csv(out / "participants.csv")
    assert set(per["status"]) == {"ok", "no reference", "no clip"}
    side = json.loads((out / "study_validation.json").read_text())
    assert len(side["unpaired"]) == 2 + 5 and "Bakdash" in side["pooling"]["rmcorr"]
    # inputs are recorded relative to the study folder (absolute paths carry user names; --full-paths adds them)
    for text in ((out / "pairing.csv").read_text(), (out / "study_validation.json").read_text(),
                 (out / "report.html").read_text()):
        assert str(study["cams"].parent) not in text and str(tmp_path) not in text
    assert (out / pairing.loc[pairing["status"] == "paired", "reference"].iloc[0]).is_file()
    # the terminal's headline: the pooled per-window fixation count as the table has it, or why it is withheld
    from aspectus.cli.validate_cmd import _pooled_line
    from aspectus.validation.windows import MIN_PAIRS

    fcount = res.pooled[(res.pooled["scope"] == "window") & (res.pooled["feature"] == "fixation_count")].iloc[0]
    line = _pooled_line(res.pooled)
    if fcount["n"] >= MIN_PAIRS:
        assert f"all {int(fcount['n'])} windows pooled: r {fcount['pearson_r']:.2f}, ICC {fcount['icc']:.2f}" in line
    else:
        assert f"{int(fcount['n'])} windows, too few for r and ICC" in line
    assert "nan" not in line.lower()

    # the repeated-measures figures equal the functions applied to the pooled windows, participants as subjects
    pooled = pd.read_csv(out / "pooled_agreement.csv")
    pairs = pd.read_csv(out / "pooled_pairs.csv")
    w = pairs[(pairs["scope"] == "window") & pairs["paired"]]
    assert sorted(w["participant"].unique()) == ["p01", "p02", "p03"]  # p01's two sessions are one subject
    fc = pooled[(pooled["scope"] == "window") & (pooled["feature"] == "fixation_duration_mean_ms")].iloc[0]
    a, b, s = w["fixation_duration_mean_ms_webcam"], w["fixation_duration_mean_ms_reference"], w["participant"]
    rc, ba = rmcorr(a, b, s), bland_altman_repeated(a, b, s)
    assert fc["participants"] == 3 and fc["rmcorr_df"] == rc.df == rc.n - 3 - 1
    assert fc["rmcorr"] == pytest.approx(rc.estimate, abs=1e-12)
    assert fc["ba_rm_loa_low"] == pytest.approx(ba.loa_low, abs=1e-9)
    assert fc["ba_rm_bias"] == pytest.approx(fc["ba_bias"], abs=1e-9)  # same mean, other interval
    assert fc["ba_rm_bias_ci_high"] - fc["ba_rm_bias"] > fc["ba_bias_ci_high"] - fc["ba_bias"]
    means = pd.read_csv(out / "participant_means.csv")
    m = means[(means["scope"] == "window") & (means["feature"] == "fixation_duration_mean_ms")]
    assert list(m["participant"]) == ["p01", "p02", "p03"]
    assert m["windows"].sum() == rc.n
    assert m.set_index("participant").loc["p02", "mean_webcam"] == pytest.approx(a[s == "p02"].mean())
    assert fc["means_n"] == 3 and np.isfinite(fc["means_pearson_r"])
    md = (out / "summary.md").read_text()
    assert ("| rmcorr [95 % CI] | rmcorr df | Bias, repeated windows [95 % CI] | 95 % limits, repeated windows | "
            "r of participant means [95 % CI] |") in md
    assert "Bakdash & Marusich 2017" in md and "Bland & Altman 2007" in md
    html = (out / "report.html").read_text()
    assert "Which figure is which" in html and "Windows taken as independent" in html
    assert "linden_brook_p05_s01: no reference" in html

    # the manifest written from the pairing gives the same study
    rows = read_validation_manifest(tmp_path / "pairs.csv")
    assert sorted(r.key for r in rows) == sorted(res.results)
    assert all(not str(r.webcam).startswith("/") or r.webcam.exists() for r in rows)


def test_folder_study_cli(study, tmp_path, capsys):
    man = tmp_path / "pairs.csv"
    rc = main(["validate", str(study["cams"]), str(study["bids"]), "-o", str(tmp_path / "dry"), "--labels", PATTERN,
               "--dry-run", "--save-manifest", str(man)])
    assert rc == 0
    cap = capsys.readouterr()
    assert cap.out.count("\npair ") + cap.out.startswith("pair ") == 4 and "dry run" in cap.out
    assert "left over: clip linden_brook_p05_s01: no reference" in cap.err
    assert "sub-p04_ses-s01" in cap.err
    assert not (tmp_path / "dry").exists() and man.exists()
    # without the label pattern nothing pairs: the error says what to do
    rc = main(["validate", str(study["cams"]), str(study["bids"]), "-o", str(tmp_path / "x"), "--no-figures"])
    err = capsys.readouterr().err
    assert rc == 2 and "--labels REGEX" in err
    # each left-over file is listed once, above the error, which points at the list instead of repeating it
    assert err.count("clip linden_brook_p05_s01: no reference") == 1 and "listed above" in err
    # a study folder against a single file is refused with a hint
    one = next(study["bids"].rglob("*_physio.tsv.gz"))
    rc = main(["validate", str(study["cams"]), str(one), "-o", str(tmp_path / "y")])
    assert rc == 2 and "reference FOLDER" in capsys.readouterr().err


def test_summary_with_one_window_per_participant_shows_no_negative_df():
    """N - k - 1 = 2 - 2 - 1 < 1: the repeated-measures correlation has no estimate (Bakdash & Marusich 2017)."""
    from aspectus.validation.repeated import repeated_agreement_table
    from aspectus.validation.summary import study_summary

    pairs = pd.DataFrame({"scope": "window", "participant": ["p01", "p02"], "paired": True,
                          "fixation_count_webcam": [30.0, 41.0], "fixation_count_reference": [31.0, 38.0]})
    rep, _ = repeated_agreement_table(pairs, ["fixation_count"])
    assert rep["rmcorr_df"].iloc[0] == -1 and np.isnan(rep["rmcorr"].iloc[0])
    pooled = pd.DataFrame({"scope": ["window"], "feature": ["fixation_count"], "n": [2], "mean_webcam": [35.5],
                           "mean_reference": [34.5], **{c: [np.nan] for c in (
                               "pearson_r", "pearson_ci_low", "pearson_ci_high", "icc", "icc_ci_low", "icc_ci_high",
                               "ccc", "ccc_ci_low", "ccc_ci_high", "ba_bias", "ba_bias_ci_low", "ba_bias_ci_high",
                               "ba_loa_low", "ba_loa_high")}}).merge(rep, on=["scope", "feature"])
    per = pd.DataFrame({"participant": ["p01", "p02"], "status": ["ok", "ok"]})
    row = study_summary(pooled, per).iloc[0]
    assert row["rmcorr_df"] == "n/a" and row["participants"] == 2 and row["mean_webcam"] == "35.50"
    # a figure with no estimate reads "n/a" once, not "n/a [n/a, n/a]" or "n/a to n/a"
    assert row["rmcorr"] == "n/a" and row["ba_loa"] == "n/a" and row["pearson_r"] == "n/a"
    # every window agreed: the interval is 0 give or take a float's last bit, printed without a "-0.00"
    agreed = pooled.assign(ba_bias=0.0, ba_bias_ci_low=-1e-15, ba_bias_ci_high=1e-15)
    assert study_summary(agreed, per).iloc[0]["ba_bias"] == "0.00 [0.00, 0.00]"
