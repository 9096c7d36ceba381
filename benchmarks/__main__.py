"""Entry point: ``python -m benchmarks [--only N ...] [--scale quick|full] [--scratch DIR]``.

Synthesizes what each target needs into a scratch folder, measures, and prints for each
target the measured ratio, the target and whether it holds.
"""

from __future__ import annotations

import argparse
import datetime
import shutil
import sys
import tempfile
import time
from pathlib import Path

from benchmarks import forcing_pass, plain_script, scene_reads, workflow_runs
from benchmarks._common import SYNTH_SECONDS

#: make bench must finish within this, synthesis of cached inputs not counted [s].
LIMIT_S = 30 * 60

#: Target 4 reads the peaks of the many-deployment runs of targets 5 and 7: after them.
DEFAULT_ORDER = (1, 2, 3, 5, 6, 7, 4)

TARGETS = {
    1: scene_reads.run,
    2: forcing_pass.run,
    3: workflow_runs.run_incremental,
    4: workflow_runs.run_memory,
    5: workflow_runs.run_overhead,
    6: plain_script.run,
    7: workflow_runs.run_scaling,
}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__)
    ap.add_argument("--only", type=int, action="append", choices=sorted(TARGETS),
                    help="run this target (repeatable); default: all")
    ap.add_argument("--scale", choices=("quick", "full"), default="full",
                    help="full: the issue's sizes; quick: reduced sizes that still "
                         "measure each ratio (the sizes are printed)")
    ap.add_argument("--scratch", type=Path, default=None,
                    help="scratch folder (default: a new folder under /tmp); archives "
                         "written there are reused by later targets and runs")
    ap.add_argument("--keep", action="store_true", help="keep the scratch folder")
    args = ap.parse_args(argv)
    scratch = args.scratch or Path(tempfile.mkdtemp(prefix="floeheat-bench-", dir="/tmp"))
    scratch.mkdir(parents=True, exist_ok=True)
    keep = args.keep or args.scratch is not None
    import floeheat

    print(f"floeheat benchmarks, scale {args.scale}, {datetime.date.today()}, "
          f"scratch {scratch}; floeheat {floeheat.__version__} from "
          f"{Path(floeheat.__file__).parent}, workflow from {Path(__file__).parent.parent}",
          flush=True)
    failed = 0
    t_all = time.perf_counter()
    try:
        for n in args.only or DEFAULT_ORDER:
            t0 = time.perf_counter()
            try:
                result = TARGETS[n](scratch / f"t{n}", args.scale)
            except Exception as exc:  # report and go on with the other targets
                print(f"[{n}] FAILED to measure: {type(exc).__name__}: {exc}", flush=True)
                failed += 1
                continue
            print(result.report(), flush=True)
            print(f"    (measured in {time.perf_counter() - t0:.0f} s)", flush=True)
            failed += not result.holds
    finally:
        if not keep:
            shutil.rmtree(scratch, ignore_errors=True)
    total = time.perf_counter() - t_all
    measured = total - SYNTH_SECONDS[0]
    verdict = "within" if measured <= LIMIT_S else "OVER"
    print(f"total {total:.0f} s, of which synthesizing inputs {SYNTH_SECONDS[0]:.0f} s "
          f"(cached in {scratch} for the next run); measured {measured:.0f} s: {verdict} "
          f"the {LIMIT_S // 60} min limit of a full make bench", flush=True)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
