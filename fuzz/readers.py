"""Coverage-guided fuzzing of the readers with atheris (a longer run than the suite's).

Usage: ``python fuzz/readers.py {csv,tsv,parquet,npy,npz,toml} [libFuzzer options] [corpus]``
(see DEVELOPERS.md).  The entry points are those of tests/test_fuzz_readers.py: any
exception other than a one-line ``InputError`` is a crash.
"""
from __future__ import annotations

import sys
from pathlib import Path

import atheris

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

with atheris.instrument_imports():
    import paths.data.tables  # noqa: F401
    import paths.workflows.cases  # noqa: F401
    from test_fuzz_readers import case_one_input, file_one_input

SUFFIX = {"csv": ".csv", "tsv": ".tsv", "parquet": ".parquet", "npy": ".npy", "npz": ".npz"}


def main() -> None:
    target = sys.argv.pop(1) if len(sys.argv) > 1 else "csv"
    if target == "toml":
        def one(data: bytes) -> None:
            case_one_input(data.decode("utf-8", "replace"))
    else:
        suffix = SUFFIX[target]

        def one(data: bytes) -> None:
            file_one_input(data, suffix)
    atheris.Setup(sys.argv, one)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
