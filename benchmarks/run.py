"""Run every `bench_*` function in `benchmarks/bench_*.py`; print a table; write JSON."""
from __future__ import annotations

import argparse
import importlib
import json
import pathlib
import sys
import traceback

HERE = pathlib.Path(__file__).resolve().parent
OUT = HERE.parent / "reports" / "bench" / "results.json"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Run penduel benchmarks.")
    parser.add_argument("-k", default="", help="only run benchmarks whose name contains this text")
    args = parser.parse_args(argv)
    sys.path.insert(0, str(HERE.parent))
    records: list[dict] = []
    for path in sorted(HERE.glob("bench_*.py")):
        module = importlib.import_module(f"benchmarks.{path.stem}")
        for attr in sorted(dir(module)):
            if not attr.startswith("bench_") or args.k not in attr:
                continue
            print(f"running {path.stem}.{attr} ...", flush=True)
            try:
                records.extend(getattr(module, attr)())
            except Exception as exc:  # a broken benchmark is reported, the others still run
                traceback.print_exc()
                records.append({"name": attr, "error": f"{type(exc).__name__}: {exc}"})
    OUT.parent.mkdir(parents=True, exist_ok=True)
    # -k runs a subset: keep the other benchmarks' latest records, replace the ones run now
    kept = json.loads(OUT.read_text()) if args.k and OUT.is_file() else []
    names = {r["name"] for r in records}
    OUT.write_text(json.dumps([r for r in kept if r.get("name") not in names] + records, indent=2))
    print(f"\n{'name':40s} {'ours s':>9s} {'ref s':>9s} {'ratio':>8s} {'peak MiB':>9s}  met  goal")
    for r in records:
        def fmt(key, spec):
            return format(r[key], spec) if key in r else "-"
        print(f"{r['name']:40s} {fmt('ours_seconds', '9.3f'):>9s} {fmt('reference_seconds', '9.3f'):>9s} "
              f"{fmt('ratio', '8.2f'):>8s} {fmt('ours_peak_mib', '9.1f'):>9s}  {str(r.get('met', '-')):4s} "
              f"{r.get('goal', r.get('error', ''))}")
    print(f"\nwrote {OUT}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
