"""BIDS export of processed clips: round trip through the BIDS reader, labels, refusals, and the export
checked against the BIDS specification's machine-readable schema.

The outside reference is the BIDS schema as the BIDS maintainers publish it (PyPI package
``bidsschematools``, schema of BIDS 1.11): required sidecar fields, allowed values, column order and
file-name rules of eye-tracking recordings (``rules.sidecars``, ``rules.tabular_data.physio``,
``rules.files.raw.task.timeseries``, ``rules.checks.eyetrack``, ``objects.metadata``).
"""
from __future__ import annotations

import gzip
import json
import re
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from _results import constructed_samples, write_batch_folder, write_clip_results

from aspectus.errors import AspectusInputError
from aspectus.reference.bids import read_bids_physio
from aspectus.studies.bids_export import export_bids

SAMPLE_KEYS = ["t_s", "valid", "yaw_deg", "pitch_deg", "blink"]


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    root = tmp_path_factory.mktemp("batch")
    return write_batch_folder(root, {
        "p01_s01": {"participant": "p01", "session": "s01", "site": "north", "group": "a", "seed": 1},
        "p01_s02": {"participant": "p01", "session": "s02", "site": "north", "group": "b", "seed": 2, "vfr": True},
        "p02_s01": {"participant": "p-02", "session": "s01", "site": "south", "group": "a", "seed": 3},
        "p03_s01": {"participant": "p03", "session": "s01", "site": "south", "status": "failed"},
    })


@pytest.fixture(scope="module")
def exported(batch, tmp_path_factory):
    root = tmp_path_factory.mktemp("bids") / "ds"
    return export_bids(batch, root, task="reading"), batch


def _recording(ex, key):
    return next(r for r in ex.recordings if r.key == key)


def _read_tsv_gz(path, columns):
    with gzip.open(path, "rt", encoding="utf-8") as fh:
        return pd.read_csv(fh, sep="\t", header=None, names=columns, na_values=["n/a"], keep_default_na=False,
                           float_precision="round_trip")


# ------------------------------------------------------------------------------------------ round trip


@pytest.mark.parametrize("key", ["p01_s01", "p01_s02"])
def test_reader_reads_the_export_back_to_identical_samples_and_events(exported, key):
    ex, batch = exported
    rec = read_bids_physio(_recording(ex, key).physio)
    samples = pd.read_parquet(batch / key / "samples.parquet")
    events = pd.read_parquet(batch / key / "events.parquet")
    # samples bit for bit
    pd.testing.assert_frame_equal(rec.samples[SAMPLE_KEYS], samples[SAMPLE_KEYS], check_exact=True)
    assert samples["blink"].any() and (~samples["valid"] & ~samples["blink"]).any()  # blink and loss present
    # events: type, onset and the further columns exactly; offset = onset + duration to the last bit
    assert set(events["type"]) == {"fixation", "saccade", "blink", "loss"}
    got = rec.events
    assert got["type"].tolist() == events["type"].tolist()
    np.testing.assert_array_equal(got["onset_s"].to_numpy(), events["onset_s"].to_numpy())
    np.testing.assert_allclose(got["offset_s"], events["offset_s"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(got["duration_ms"], events["duration_ms"], rtol=0, atol=1e-9)
    for c in ("yaw_deg", "pitch_deg", "amplitude_deg", "dispersion_deg"):
        np.testing.assert_array_equal(got[c].to_numpy(dtype=float), events[c].to_numpy(dtype=float))
    assert got["n_samples"].astype(int).tolist() == events["n_samples"].astype(int).tolist()


def test_variable_frame_rate_keeps_every_frame_time_and_states_the_nominal_rate(exported):
    ex, batch = exported
    r = _recording(ex, "p01_s02")
    assert r.variable_frame_rate and not _recording(ex, "p01_s01").variable_frame_rate
    side = json.loads(r.physio.with_name(r.physio.name.replace(".tsv.gz", ".json")).read_text())
    t = pd.read_parquet(batch / "p01_s02" / "samples.parquet")["t_s"].to_numpy()
    assert side["SamplingFrequency"] == pytest.approx(1.0 / np.median(np.diff(t)), rel=1e-12)
    assert "variable frame rate" in side["timestamp"]["Description"]
    table = _read_tsv_gz(r.physio, side["Columns"])
    np.testing.assert_array_equal(table["timestamp"].to_numpy(), t)  # no resampling, no frame dropped
    assert len(table) == r.n_samples == len(t)


def test_the_same_samples_in_the_reference_reader_give_the_same_events(exported):
    """The export is a valid reference recording: the validation mode's analysis of it equals the clip's."""
    from aspectus.events.analysis import AnalysisParams, run_analysis

    ex, batch = exported
    rec = read_bids_physio(_recording(ex, "p01_s01").physio)
    a = run_analysis(rec.samples, AnalysisParams()).events
    b = pd.read_parquet(batch / "p01_s01" / "events.parquet")
    pd.testing.assert_frame_equal(a.reset_index(drop=True), b.reset_index(drop=True), check_dtype=False,
                                  check_exact=True)


# ------------------------------------------------------------------------------------------ dataset layout


def test_participants_sessions_and_labels(exported):
    ex, _ = exported
    root = ex.root
    assert sorted(r.key for r in ex.recordings) == ["p01_s01", "p01_s02", "p02_s01"]
    assert ex.skipped and ex.skipped[0][0] == "p03_s01" and "failed" in ex.skipped[0][1]
    parts = pd.read_csv(root / "participants.tsv", sep="\t", dtype=str)
    # site is constant per participant: a participant column; group varies within p01: a session column
    assert parts.to_dict("records") == [{"participant_id": "sub-p01", "site": "north"},
                                        {"participant_id": "sub-p02", "site": "south"}]
    ses = pd.read_csv(root / "sub-p01" / "sub-p01_sessions.tsv", sep="\t", dtype=str)
    assert ses.to_dict("records") == [{"session_id": "ses-s01", "group": "a"}, {"session_id": "ses-s02", "group": "b"}]
    assert (root / "sub-p02" / "ses-s01" / "beh" /
            "sub-p02_ses-s01_task-reading_recording-cyclopean_physio.tsv.gz").is_file()  # "p-02" -> p02
    dd = json.loads((root / "dataset_description.json").read_text())
    assert dd["DatasetType"] == "derivative"
    gen = dd["GeneratedBy"][0]
    assert gen["Name"] == "aspectus" and gen["Version"]
    assert gen["Parameters"]["analysis"]["detector"] == "idt"  # the processing parameters travel


def test_clips_that_share_participant_session_and_task_become_runs(tmp_path):
    batch = write_batch_folder(tmp_path / "b", {"a": {"participant": "p1", "session": "s1", "seed": 1},
                                                "b": {"participant": "p1", "session": "s1", "seed": 2}})
    ex = export_bids(batch, tmp_path / "bids")
    names = sorted(r.physio.name for r in ex.recordings)
    assert names == ["sub-p1_ses-s1_task-webcam_run-1_recording-cyclopean_physio.tsv.gz",
                     "sub-p1_ses-s1_task-webcam_run-2_recording-cyclopean_physio.tsv.gz"]


def test_labels_that_bids_cannot_tell_apart_are_refused_before_anything_is_written(tmp_path):
    batch = write_batch_folder(tmp_path / "b", {"a": {"participant": "p-1", "seed": 1},
                                                "b": {"participant": "p_1", "seed": 2}})
    with pytest.raises(AspectusInputError, match="both become sub-p1"):
        export_bids(batch, tmp_path / "bids")
    assert not (tmp_path / "bids").exists()


def test_clips_without_labels_take_them_from_the_file_name(tmp_path):
    write_clip_results(tmp_path / "out" / "linden_brook_p07_s02", constructed_samples(seed=4))
    ex = export_bids(tmp_path / "out", tmp_path / "bids")  # the -o folder of `aspectus process`
    r = ex.recordings[0]
    assert (r.subject, r.session) == ("p07", "s02")
    assert any("file name" in n for n in ex.notes)


def test_a_folder_that_holds_something_else_is_never_written_into(exported, tmp_path):
    _, batch = exported
    target = tmp_path / "mine"
    target.mkdir()
    (target / "notes.txt").write_text("keep me")
    with pytest.raises(AspectusInputError, match="not empty"):
        export_bids(batch, target)
    assert [p.name for p in target.iterdir()] == ["notes.txt"]


def test_exporting_again_into_an_earlier_export_replaces_it(exported, tmp_path):
    _, batch = exported
    first = export_bids(batch, tmp_path / "bids")
    again = export_bids(batch, tmp_path / "bids")
    assert [r.physio for r in again.recordings] == [r.physio for r in first.recordings]


def test_a_damaged_clip_is_left_out_with_the_reason_and_the_others_are_written(tmp_path):
    batch = write_batch_folder(tmp_path / "b", {"a": {"participant": "p1", "seed": 1},
                                                "b": {"participant": "p2", "seed": 2}})
    p = batch / "b" / "samples.parquet"
    data = bytearray(p.read_bytes())
    data[len(data) // 2] ^= 0xFF
    p.write_bytes(bytes(data))
    ex = export_bids(batch, tmp_path / "bids")
    assert [r.key for r in ex.recordings] == ["a"]
    assert ex.skipped[0][0] == "b" and "checksum" in ex.skipped[0][1]


def test_clips_without_samples_are_left_out_with_what_to_do(tmp_path):
    batch = write_batch_folder(tmp_path / "b", {"a": {"participant": "p1", "seed": 1}})
    (batch / "a" / "samples.parquet").unlink()
    with pytest.raises(AspectusInputError, match="samples.parquet is missing.*process the clip again"):
        export_bids(batch, tmp_path / "bids")


def test_purged_clips_say_that_only_processing_the_clip_again_rebuilds_them(tmp_path):
    # `aspectus batch` counts a purged clip as done and skips it: the advice must name `aspectus process`
    from aspectus.privacy import plan_purge, purge

    batch = write_batch_folder(tmp_path / "b", {"a": {"participant": "p1", "seed": 1},
                                                "b": {"participant": "p2", "seed": 2}})
    purge(plan_purge(batch / "b"))
    assert not (batch / "b" / "samples.parquet").exists()
    ex = export_bids(batch, tmp_path / "bids")
    assert [r.key for r in ex.recordings] == ["a"]
    key, why = ex.skipped[0]
    assert key == "b"
    assert "deleted by `aspectus purge`" in why and "aspectus process " in why and "skips it" in why


def test_cli_export_bids(exported, tmp_path):
    _, batch = exported
    r = subprocess.run([sys.executable, "-m", "aspectus", "export-bids", str(batch), "-o", str(tmp_path / "bids"),
                        "--task", "reading"], capture_output=True, text=True, timeout=300)
    assert r.returncode == 1, r.stderr  # one clip of the batch failed: it is listed, the exit code says so
    assert "3 recording(s) written" in r.stdout
    assert "p03_s01: not exported" in r.stdout
    assert "variable frame rate" in r.stdout
    r = subprocess.run([sys.executable, "-m", "aspectus", "export-bids", str(tmp_path / "nowhere"), "-o",
                        str(tmp_path / "b2")], capture_output=True, text=True, timeout=300)
    assert r.returncode == 2 and "aspectus: error:" in r.stderr and "nowhere" in r.stderr


# ------------------------------------------------------------------------------------------ the BIDS schema

bst = pytest.importorskip("bidsschematools.schema", reason="bidsschematools (the BIDS schema) is in the dev extra")


@pytest.fixture(scope="module")
def spec():
    return bst.load_schema()


#: what a selector can ask about our sidecars: beh datatype and modality, a derivative dataset, .json
_CONTEXT = {"datatype": "beh", "modality": "beh", "extension": ".json",
            "dataset.dataset_description.DatasetType": "derivative"}
_OUR_ENTITIES = {"subject", "session", "task", "run", "recording"}


def _selected(selectors: list[str], suffix: str, sidecar: dict) -> bool:
    """Evaluate a sidecar rule's selectors for one of our ``beh`` JSON sidecars with ``suffix``.

    A rule is left out as soon as one selector is false; a selector form this test does not know fails
    the test only if the rule's other selectors would select it.
    """
    ctx = dict(_CONTEXT, suffix=suffix)
    unknown = []
    for sel in selectors:
        sel = sel.strip()
        if m := re.fullmatch(r"([\w.]+) == [\"'](.+)[\"']", sel):
            name, want = m.groups()
            if name.startswith("sidecar."):
                ok = sidecar.get(name.split(".", 1)[1]) == want
            elif name.startswith("entities."):
                ok = False  # none of the entities these rules ask about (part ...) is used
            elif name in ctx:
                ok = ctx[name] == want
            else:
                unknown.append(sel)
                continue
        elif m := re.fullmatch(r"(!?)intersects\(\[?(\w+)\]?, \[(.*)\]\)", sel):
            if m.group(2) not in ctx:
                unknown.append(sel)
                continue
            ok = (ctx[m.group(2)] in re.findall(r"[\"'](\w+)[\"']", m.group(3))) != bool(m.group(1))
        elif m := re.fullmatch(r"match\(extension, [\"'](.+)[\"']\)", sel):
            ok = re.search(m.group(1).replace("\\\\", "\\"), ".json") is not None
        elif m := re.fullmatch(r"[\"'](\w+)[\"'] in entities", sel):
            ok = m.group(1) in _OUR_ENTITIES
        elif sel == "false":
            ok = False
        else:
            unknown.append(sel)
            continue
        if not ok:
            return False
    assert not unknown, f"selector form not handled by this test: {unknown}"
    return True


def _check_value(meta: dict, value, where: str) -> None:
    kind = meta.get("type")
    types = {"string": str, "number": (int, float), "integer": int, "array": list, "object": dict}
    if kind in types:
        assert isinstance(value, types[kind]) and not isinstance(value, bool), f"{where}: {value!r} is not {kind}"
    if "enum" in meta:
        assert value in meta["enum"], f"{where}: {value!r} not in {meta['enum']}"
    if kind == "number" and "exclusiveMinimum" in meta:
        assert value > meta["exclusiveMinimum"], where
    if kind == "array" and "items" in meta:
        for v in value:
            _check_value(meta["items"], v, where + "[]")


def _sidecar_rules(spec, suffix: str, sidecar: dict) -> dict[str, str]:
    out = {}

    def walk(node):
        if "selectors" in node:
            if _selected(list(node["selectors"]), suffix, sidecar):
                for name, level in node["fields"].items():
                    out[name] = level if isinstance(level, str) else level.get("level")
            return
        for child in node.values():
            walk(child)

    walk(spec["rules"]["sidecars"])
    return out


def test_eyetracking_sidecars_meet_the_bids_schema(exported, spec):
    ex, _ = exported
    meta = spec["objects"]["metadata"]
    for r in ex.recordings:
        for suffix in ("physio", "physioevents"):
            path = r.physio.with_name(r.physio.name.replace("_physio.tsv.gz", f"_{suffix}.json"))
            side = json.loads(path.read_text())
            rules = _sidecar_rules(spec, suffix, side)
            required = {k for k, v in rules.items() if v == "required"}
            if suffix == "physio":  # the eye-tracking rule applied (PhysioType eyetrack)
                assert {"SamplingFrequency", "StartTime", "Columns", "RecordedEye",
                        "SampleCoordinateSystem"} <= required
            else:
                assert {"Columns", "OnsetSource"} <= required
            assert required <= set(side), f"{path.name}: missing {required - set(side)}"
            for key, value in side.items():
                if key in side["Columns"]:  # a column description
                    assert isinstance(value, dict) and value.get("Description"), f"{path.name}: {key}"
                    continue
                assert key in meta, f"{path.name}: {key} is not a BIDS metadata field"
                _check_value(meta[key], value, f"{path.name}:{key}")
            if suffix == "physio":
                # the schema gives EyeTrackerDistance in metres; a student sits 0.5-0.9 m from the camera
                # (field notes, common practice); the constructed clips say 620 mm
                assert "meters" in meta["EyeTrackerDistance"]["description"]
                assert side["EyeTrackerDistance"] == pytest.approx(0.62, abs=0.01)


def test_eyetracking_tables_meet_the_bids_schema(exported, spec):
    ex, _ = exported
    tab = spec["rules"]["tabular_data"]["physio"]
    cols = spec["objects"]["columns"]
    for r in ex.recordings:
        for suffix, rule in (("physio", tab["PhysioEyeTracking"]), ("physioevents", tab["PhysioEventsColumns"])):
            path = r.physio.with_name(r.physio.name.replace("_physio.tsv.gz", f"_{suffix}.tsv.gz"))
            side = json.loads(path.with_name(path.name.replace(".tsv.gz", ".json")).read_text())
            names = [cols[c]["name"] for c in rule["initial_columns"]]
            assert side["Columns"][:len(names)] == names, f"{path.name}: columns must start with {names}"
            for c, level in rule["columns"].items():
                if level == "required":
                    assert cols[c]["name"] in side["Columns"], f"{path.name}: {c}"
            table = _read_tsv_gz(path, side["Columns"])
            with gzip.open(path, "rt", encoding="utf-8") as fh:
                assert fh.readline().split("\t")[0] != side["Columns"][0]  # no header row
            for c in side["Columns"]:
                spec_col = cols.get(c) or cols.get(f"{c}__{'eyetrack' if suffix == 'physio' else suffix}")
                if spec_col and spec_col.get("type") == "number":
                    v = table[c].dropna()
                    assert pd.api.types.is_numeric_dtype(v), f"{path.name}: {c} must be numbers or n/a"
                    if "minimum" in spec_col:
                        assert (v >= spec_col["minimum"]).all(), f"{path.name}: {c} below {spec_col['minimum']}"
            if suffix == "physioevents":  # rules.checks.eyetrack.OnsetSourceConsistency
                physio_side = json.loads(r.physio.with_name(r.physio.name.replace(".tsv.gz", ".json")).read_text())
                assert side["OnsetSource"] in physio_side["Columns"]


def test_file_names_and_dataset_files_meet_the_bids_schema(exported, spec):
    ex, _ = exported
    rule = spec["rules"]["files"]["raw"]["task"]["timeseries"]
    ents = spec["objects"]["entities"]
    order = [e for e in spec["rules"]["entities"]]
    key_of = {ents[e]["name"]: e for e in ents}
    for path in ex.root.rglob("sub-*_*"):
        if path.name.endswith(("_sessions.tsv", "_sessions.json")):
            continue
        assert path.parent.name in rule["datatypes"], path
        stem, ext = path.name.split(".", 1)
        assert "." + ext in rule["extensions"], path
        parts = stem.split("_")
        assert parts[-1] in rule["suffixes"], path
        used = [key_of[p.split("-", 1)[0]] for p in parts[:-1]]
        assert used == sorted(used, key=order.index), f"{path.name}: entities out of order"
        assert all(re.fullmatch(r"[0-9a-zA-Z]+", p.split("-", 1)[1]) for p in parts[:-1]), path
        for e, level in rule["entities"].items():
            if level == "required":
                assert e in used, f"{path.name}: needs {e}"
        assert set(used) <= set(rule["entities"]), path
    dd = json.loads((ex.root / "dataset_description.json").read_text())
    meta = spec["objects"]["metadata"]
    for key in ("Name", "BIDSVersion", "DatasetType", "GeneratedBy"):
        _check_value(meta[key], dd[key], f"dataset_description:{key}")
    for g in dd["GeneratedBy"]:
        assert set(meta["GeneratedBy"]["items"]["required"]) <= set(g)
    pid = spec["objects"]["columns"]["participant_id"]["pattern"]
    sid = spec["objects"]["columns"]["session_id"]["pattern"]
    assert all(re.fullmatch(pid, v) for v in pd.read_csv(ex.root / "participants.tsv", sep="\t")["participant_id"])
    for f in ex.root.glob("sub-*/sub-*_sessions.tsv"):
        assert all(re.fullmatch(sid, v) for v in pd.read_csv(f, sep="\t")["session_id"])


# ------------------------------------------------------------------------------------------ Parquet units


def test_parquet_outputs_carry_units_in_their_schema(exported):
    import pyarrow.parquet as pq

    _, batch = exported
    folder = batch / "p01_s01"
    want = {"samples.parquet": {"t_s": "s", "yaw_deg": "deg", "distance_mm": "mm", "pupil": "a.u."},
            "events.parquet": {"onset_s": "s", "duration_ms": "ms", "amplitude_deg": "deg"},
            "features.parquet": {"fixation_rate_per_s": "1/s", "blink_rate_per_min": "1/min",
                                 "fixation_duration_mean_ms": "ms", "valid_frac": "1"}}
    for name, units in want.items():
        schema = pq.read_schema(folder / name)
        table_units = json.loads(schema.metadata[b"units"])
        assert set(table_units) == set(schema.names)
        for col, unit in units.items():
            assert schema.field(col).metadata[b"unit"].decode() == unit, (name, col)
            assert table_units[col] == unit
        assert b"unit" not in (schema.field("valid" if name == "samples.parquet" else
                                            "type" if name == "events.parquet" else "scope").metadata or {})


def test_a_study_file_is_exported_with_labels_from_its_clip_names(tmp_path):
    from aspectus.studies.project import new_study

    study = new_study(path=tmp_path / "pilot.aspectus-study.json", name="Reading pilot", output_dir="results")
    for stem, seed in (("anna_s1", 1), ("anna_s2", 2), ("ben_s1", 3)):
        (tmp_path / f"{stem}.mp4").write_bytes(b"not decoded by the export")
        study.add_clip(tmp_path / f"{stem}.mp4")
        if stem != "ben_s1":  # ben's clip was never processed
            write_clip_results(tmp_path / "results" / stem, constructed_samples(seed=seed))
    study.save()
    ex = export_bids(study.path, tmp_path / "bids")
    assert sorted((r.subject, r.session) for r in ex.recordings) == [("anna", "s1"), ("anna", "s2")]
    assert ex.skipped == [("ben_s1", "not processed (no run.json)")]
    assert json.loads((ex.root / "dataset_description.json").read_text())["Name"].startswith("Reading pilot")
