"""Run every benchmark module, print the tables, write the JSON record.

Usage::

    python benchmarks/run.py [--quick] [--only path [--only cv ...]] [--large] [--no-write]
    python benchmarks/run.py --readme-table [--record FILE]

A benchmark module is any ``benchmarks/bench_<name>.py`` defining
``run(quick: bool) -> list[dict]`` (rows built with ``harness.row``); it is
discovered by its file name, nothing to register.  ``--readme-table`` prints
the Markdown tables of the newest record in ``benchmarks/results/`` (or of
``--record FILE``) without running anything.
"""
from __future__ import annotations

import argparse
import importlib
import os
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import harness as H  # noqa: E402


def discover() -> dict[str, Path]:
    """``{name: path}`` of every ``bench_<name>.py`` next to this file, sorted by name."""
    return {p.stem[len("bench_"):]: p for p in sorted(HERE.glob("bench_*.py"))}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats, smaller subsets")
    ap.add_argument("--only", action="append", default=[], metavar="NAME",
                    help="run only bench_NAME.py (repeatable)")
    ap.add_argument("--large", action="store_true",
                    help="include the large optional cases (sets PATHS_BENCH_LARGE=1)")
    ap.add_argument("--no-write", action="store_true", help="do not write a JSON record")
    ap.add_argument("--readme-table", action="store_true",
                    help="print the Markdown tables of the newest (or --record) record; run nothing")
    ap.add_argument("--record", type=Path, help="record to render with --readme-table")
    args = ap.parse_args(argv)

    if args.readme_table:
        path = args.record or H.latest_record()
        if path is None:
            print(f"no record in {H.RESULTS_DIR}; run `python benchmarks/run.py` first",
                  file=sys.stderr)
            return 2
        rec = H.load_record(path)
        print(f"<!-- benchmark record: {Path(path).name} -->")
        print(H.render_markdown(rec, benches=args.only or None))
        return 0

    if args.large:
        os.environ["PATHS_BENCH_LARGE"] = "1"
    found = discover()
    unknown = [n for n in args.only if n not in found]
    if unknown:
        print(f"no benchmark module for {', '.join(unknown)}; available: {', '.join(found)}",
              file=sys.stderr)
        return 2
    names = args.only or list(found)
    rows, seconds = [], {}
    for name in names:
        mod = importlib.import_module(f"bench_{name}")
        t0 = time.perf_counter()
        print(f"running bench_{name} (quick={args.quick}) ...", file=sys.stderr, flush=True)
        out = mod.run(quick=args.quick)
        seconds[name] = time.perf_counter() - t0
        for r in out:
            missing = {"bench", "case", "name", "value", "unit", "kind"} - set(r)
            if missing:
                raise ValueError(f"bench_{name}: row without {sorted(missing)}: {r}")
        rows.extend(out)
        print(f"  bench_{name}: {len(out)} rows in {seconds[name]:.1f} s", file=sys.stderr)
        if len(names) > 1:  # this module's tables now, the whole record at the end
            print(H.render_markdown({"rows": out, "quick": args.quick, "machine": {}}),
                  file=sys.stderr, flush=True)
    record = {"rows": rows, "quick": args.quick, "machine": H.machine_info(),
              "created_utc": time.strftime("%Y-%m-%dT%H:%M:%S+00:00", time.gmtime())}
    print(H.render_markdown(record))
    if not args.no_write:
        dest = H.write_record(rows, quick=args.quick, extra={"bench_seconds": seconds,
                                                             "benches": names})
        print(f"record written to {dest}", file=sys.stderr)
    failed = [r for r in rows if r.get("ok") is False]
    if failed:
        print(f"{len(failed)} target(s) not met:", file=sys.stderr)
        for r in failed:
            print(f"  {r['bench']} {r['case']} {r['name']} ({r.get('threads')} thr): "
                  f"{r['value']:.3g} vs {r['target']}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
