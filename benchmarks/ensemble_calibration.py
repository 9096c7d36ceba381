"""Calibration of the ensemble's 90 % interval of the season transmittance.

For each seed, synthesizes deployments whose truth is known and whose inputs carry
errors drawn from the same distributions the ensemble uses
(:mod:`floeheat.synth.calibration`: biased shortwave, sampling error of each radar
scene's f_ow, ice-bottom picks off at each end, a storage bound anywhere within the
sensitivity offset, true rho_i, L, k_i and albedo away from the central values), runs
the budget and its ensemble as the budget stage does, and counts how often the interval
[t_ice_lo, t_ice_hi] holds the true season transmittance. Prints every case, then the
coverage per radius and overall with its binomial 90 % interval (scipy), and the mean
interval width. A calibrated ensemble covers the truth in about 90 % of cases.

Usage::

    .venv/bin/python benchmarks/ensemble_calibration.py [--seeds 25] [--cases 2]
        [--members 200] [--days 40]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import yaml
from scipy import stats

from floeheat.synth.calibration import analyse_case, calibration_case


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=25, help="number of seeds (>= 20)")
    parser.add_argument("--cases", type=int, default=2, help="deployments per seed")
    parser.add_argument("--members", type=int, default=200)
    parser.add_argument("--days", type=int, default=40)
    parser.add_argument("--config", default="config/config.yaml")
    args = parser.parse_args()
    settings = dict(yaml.safe_load(open(args.config))["ensemble"])
    settings["members"] = args.members
    factors = settings["factors"]
    t0 = time.perf_counter()
    hits, widths, radii = [], [], None
    print("seed case radius_m      truth    central   t_ice_lo   t_ice_hi  inside")
    for seed in range(args.seeds):
        for case in range(args.cases):
            c = calibration_case(seed, factors, case=case, days=args.days)
            # the ensemble's own seed differs from the world's, per seed
            ds = analyse_case(c, dict(settings, seed=10_000 + seed))
            radii = ds["radius"].values
            lo, mid, hi = (ds[v].values[0] for v in ("t_season_lo", "t_season", "t_season_hi"))
            inside = (c["truth"] >= lo) & (c["truth"] <= hi)
            hits.append(inside)
            widths.append(hi - lo)
            for j, r in enumerate(radii):
                print(f"{seed:4d} {case:4d} {r:8.0f} {c['truth'][j]:10.4f} {mid[j]:10.4f} "
                      f"{lo[j]:10.4f} {hi[j]:10.4f}  {bool(inside[j])}")
    hits, widths = np.array(hits), np.array(widths)
    print()
    for j, r in enumerate(radii):
        k, n = int(hits[:, j].sum()), hits.shape[0]
        print(f"radius {r:6.0f} m: coverage {k}/{n} = {k / n:.3f}; mean interval width "
              f"{np.mean(widths[:, j]):.4f}")
    k, n = int(hits.sum()), hits.size
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=0.90, method="exact")
    print(f"overall: coverage {k}/{n} = {k / n:.3f} (nominal 0.900; binomial 90 % interval "
          f"{ci.low:.3f}-{ci.high:.3f}); {args.seeds} seeds x {args.cases} deployments, "
          f"{args.members} members, {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
