"""``aspectus export-bids RESULTS -o BIDS_ROOT``: processed clips as a BIDS eye-tracking derivatives dataset."""
from __future__ import annotations


def register(sub) -> None:
    p = sub.add_parser(
        "export-bids",
        help="write processed clips as a BIDS eye-tracking dataset (derivatives)",
        description="Write every finished clip of RESULTS (a batch output folder, a study file, or the -o "
        "folder of 'aspectus process') as a BIDS eye-tracking recording: "
        "sub-<p>/[ses-<s>/]beh/*_recording-cyclopean_physio.tsv.gz with its JSON sidecar (gaze yaw/pitch in "
        "degrees, one row per video frame with its own timestamp; frames are not resampled, "
        "SamplingFrequency is the nominal rate 1 / median frame interval), *_physioevents.tsv.gz with the "
        "fixations, saccades, blinks and data-loss periods, participants.tsv and sessions.tsv from the "
        "clips' labels, and dataset_description.json (DatasetType derivative, GeneratedBy: aspectus, "
        "version, parameters). BIDS_ROOT must be new, empty, or an earlier aspectus export. Clips that are "
        "not finished or whose files are damaged are listed and left out; the exit code is then 1.",
    )
    p.add_argument("results", metavar="RESULTS", help="batch output folder, study file, or folder of clip results")
    p.add_argument("-o", "--out", dest="out", metavar="BIDS_ROOT", required=True, help="BIDS dataset folder")
    p.add_argument("--task", default=None, metavar="LABEL",
                   help="BIDS task label for clips without a 'task' label (default: webcam)")
    p.add_argument("--name", default=None, help="dataset name for dataset_description.json")
    p.set_defaults(func=run)


def run(args) -> int:
    from aspectus.cli.outdir import prepare_out_dir
    from aspectus.studies.bids_export import export_bids

    prepare_out_dir(args.out, create=False)
    ex = export_bids(args.results, args.out, task=args.task, name=args.name)
    for r in ex.recordings:
        rate = f"{r.sampling_frequency_hz:.3f} Hz" + (" nominal, variable frame rate" if r.variable_frame_rate else "")
        print(f"{r.key}: {r.physio.relative_to(ex.root)} ({r.n_samples} samples at {rate}, {r.n_events} events)")
    for note in ex.notes:
        print(f"note: {note}")
    for key, why in ex.skipped:
        print(f"{key}: not exported: {why}")
    print(f"{len(ex.recordings)} recording(s) written to {ex.root}" +
          (f"; {len(ex.skipped)} clip(s) left out" if ex.skipped else ""))
    return 1 if ex.skipped else 0
