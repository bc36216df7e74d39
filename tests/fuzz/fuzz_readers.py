"""Coverage-guided fuzzing of aspectus's readers with atheris (optional; not part of the test suite).

Usage, from the repository root::

    .venv/bin/pip install atheris
    .venv/bin/python tests/fuzz/fuzz_readers.py TARGET [atheris/libFuzzer options] [CORPUS_DIR]

TARGET is one of: table, bids, sidecar, mapping, segments, manifest,
validation_manifest. For example, ten minutes on the gaze-table reader,
keeping interesting inputs in a folder::

    mkdir -p /tmp/fuzz-table
    .venv/bin/python tests/fuzz/fuzz_readers.py table -max_total_time=600 /tmp/fuzz-table

A finding is any exception other than ``AspectusInputError`` naming the file
(see ``tests/fuzz/targets.py``); atheris stops and writes the input as
``crash-*``. Reproduce it with::

    .venv/bin/python tests/fuzz/fuzz_readers.py TARGET crash-<hash>

and turn it into a regression example in ``tests/cli/test_fuzz_parsers.py``.
"""
from __future__ import annotations

import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))


def main(argv: list[str]) -> int:
    try:
        import atheris
    except ImportError:
        print("atheris is not installed: .venv/bin/pip install atheris", file=sys.stderr)
        return 2
    with atheris.instrument_imports():
        import targets
        import aspectus.studies.clips  # noqa: F401 - imported here so that their code is instrumented
        import aspectus.reference.bids  # noqa: F401
        import aspectus.reference.table  # noqa: F401
        import aspectus.events.segments  # noqa: F401
        import aspectus.validation.pair  # noqa: F401
    if len(argv) < 2 or argv[1] not in targets.TARGETS:
        print(f"usage: {argv[0]} TARGET [options] [CORPUS]; TARGET one of {', '.join(targets.TARGETS)}",
              file=sys.stderr)
        return 2
    name = argv[1]
    folder = Path(tempfile.mkdtemp(prefix=f"aspectus-fuzz-{name}-"))

    def one_input(data: bytes) -> None:
        targets.check_outcome(name, data, folder)

    atheris.Setup([argv[0]] + argv[2:], one_input)
    atheris.Fuzz()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
