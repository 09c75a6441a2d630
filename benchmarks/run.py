"""Run every benchmark of the project, print one table, optionally write the figures as JSON.

    python benchmarks/run.py [--quick] [--json FILE] [--only NAME[,NAME...]]

Each module ``benchmarks/bench_<name>.py`` exposes ``run(quick: bool) -> dict`` whose keys are
prefixed with its name (``calculus.*``, ``forcing.*``, ``omega.*``, ...).  Ratios are measured side
by side in one run; absolute times are printed for information only.
"""

from __future__ import annotations

import argparse
import importlib
import json
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

BENCHMARKS = ["calculus", "forcing", "omega", "stream", "ascent"]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="smaller grids (each benchmark well under a minute)")
    ap.add_argument("--json", metavar="FILE", help="write the figures to FILE as JSON")
    ap.add_argument("--only", help="comma-separated benchmark names")
    args = ap.parse_args(argv)
    names = args.only.split(",") if args.only else BENCHMARKS
    figures: dict = {"quick": args.quick}
    for name in names:
        path = HERE / f"bench_{name}.py"
        if not path.exists():
            print(f"-- {name}: not available yet")
            continue
        mod = importlib.import_module(f"bench_{name}")
        t0 = time.perf_counter()
        res = mod.run(quick=args.quick)
        figures.update(res)
        print(f"-- {name} ({time.perf_counter() - t0:.1f} s)")
        for k, v in res.items():
            shown = f"{v:.4g}" if isinstance(v, float) else str(v)
            print(f"   {k:42s} {shown}")
    if args.json:
        Path(args.json).write_text(json.dumps(figures, indent=2, default=float))
        print(f"figures written to {args.json}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
