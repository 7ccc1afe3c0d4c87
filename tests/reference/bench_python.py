#!/usr/bin/env python3
"""Times a plain Python analysis of setpoint-step episodes, for a side-by-side speed comparison.

Interface (kept small; `headroom bench` relies on it):

    python bench_python.py --csv-dir DIR [--json]
        Analyses every DIR/*.csv (columns time,sp,pv,op; time in seconds; one setpoint step
        each) and prints, with --json, one JSON object on stdout:
            {"episodes": n, "seconds_total": x, "seconds_per_episode": y, ...}
        Extra fields: "seconds_load" (CSV parsing, not included in seconds_total),
        "fit_failures" (episodes where curve_fit did not converge), "python", "numpy", "scipy",
        "control" (versions). Without --json a short human-readable summary is printed.

    python bench_python.py --generate N --out DIR [--seed S] [--json]
        Writes N invented episodes DIR/episode_00000.csv ... with the generator of loopsim.py
        (the same one step_info_check.py uses), plus DIR/manifest.json: a list of
        {"file", "op_min", "op_max", "settle_band_pct", "settle_within_s", "sample_s"} so a
        caller can run `headroom analyze` on the same files with the same limits and spec.
        Both modes may be given together: generate first, then time DIR.

Per episode, the timed work is: python-control `control.step_info` on the response after the step
(on y - y0 with yfinal = setpoint change, so its band is +/- 2 % of the change around the new
setpoint), plus a scipy `curve_fit` of a first-order-plus-dead-time model (gain K, time constant
tau, dead time theta) driven by the recorded OP as its input (the step and every controller move
after it). Interpreter start-up, imports and CSV parsing are not in seconds_total.

Exit status: 0 ok, 2 bad arguments or no CSV files, 3 a required package is missing.
"""

from __future__ import annotations

import argparse
import glob
import json
import os
import platform
import sys
import time as clock

INSTALL_HINT = (
    "python3 -m venv target/pyenv && "
    "target/pyenv/bin/pip install -r tests/reference/requirements.txt"
)

for _pkg in ("numpy", "scipy", "control"):
    try:
        __import__(_pkg)
    except ImportError as _err:
        print(f"ERROR: Python package '{_pkg}' cannot be imported by {sys.executable} ({_err}).\n"
              f"From the crate root, install with:\n    {INSTALL_HINT}", file=sys.stderr)
        sys.exit(3)

import control  # noqa: E402
import numpy as np  # noqa: E402
import scipy  # noqa: E402
from scipy.optimize import curve_fit  # noqa: E402
from scipy.signal import lfilter  # noqa: E402

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from loopsim import random_cases, simulate  # noqa: E402

BAND = 0.02


def load(path):
    data = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
    return data[:, 0], data[:, 1], data[:, 2], data[:, 3]


def fopdt_response(t, u, u0, y0, gain, tau, theta):
    """PV predicted by K e^(-theta s)/(tau s + 1) from the recorded OP (held between samples,
    delayed by linear interpolation), starting in steady state at (u0, y0)."""
    v = np.interp(t - theta, t, u, left=u0) - u0
    dts = np.diff(t)
    if dts.size and np.ptp(dts) <= 1e-9 * dts[0]:
        # Uniform sampling: x[k] = a x[k-1] + (1 - a) K v[k-1], as one vectorised filter.
        a = np.exp(-dts[0] / tau)
        return y0 + lfilter([0.0, (1.0 - a) * gain], [1.0, -a], v)
    x = np.zeros_like(t)
    for k in range(1, len(t)):
        a = np.exp(-dts[k - 1] / tau)
        x[k] = a * x[k - 1] + (1.0 - a) * gain * v[k - 1]
    return y0 + x


def analyse(t, sp, pv, op):
    """One episode: step metrics and an FOPDT fit. Returns (step_info dict, params or None)."""
    changes = np.nonzero(sp != sp[0])[0]
    if changes.size == 0:
        raise ValueError("no setpoint change")
    i0 = int(changes[0])
    sp_from, sp_to = sp[0], sp[i0]
    delta = sp_to - sp_from
    rel_t = t[i0:] - t[i0]
    info = control.step_info(pv[i0:] - sp_from, rel_t, yfinal=delta,
                             SettlingTimeThreshold=BAND, RiseTimeLimits=(0.1, 0.9))

    u0 = float(np.mean(op[:i0]))
    y0 = float(np.mean(pv[:i0]))
    du = op[-1] - u0
    k0 = (pv[-1] - y0) / du if abs(du) > 1e-9 else 1.0
    span = t[-1] - t[0]
    dt = float(np.median(np.diff(t)))

    def model(tt, gain, tau, theta):
        return fopdt_response(tt, op, u0, y0, gain, tau, theta)

    try:
        params, _ = curve_fit(model, t, pv, p0=[k0, span / 10.0, dt],
                              bounds=([-np.inf, dt / 10.0, 0.0], [np.inf, 10.0 * span, span / 2.0]),
                              maxfev=4000)
    except (RuntimeError, ValueError):
        params = None
    return info, params


def generate(n, out, seed):
    os.makedirs(out, exist_ok=True)
    manifest = []
    for i, case in enumerate(random_cases(n, seed)):
        name = f"episode_{i:05d}.csv"
        simulate(case).write_csv(os.path.join(out, name))
        manifest.append({
            "file": name,
            "op_min": case.op_min,
            "op_max": case.op_max,
            "settle_band_pct": 100.0 * BAND,
            "settle_within_s": case.settle_within_s,
            "sample_s": case.sample_s,
        })
    with open(os.path.join(out, "manifest.json"), "w") as f:
        json.dump(manifest, f, indent=1)
    return manifest


def bench(csv_dir):
    files = sorted(glob.glob(os.path.join(csv_dir, "*.csv")))
    if not files:
        return None
    t_load = clock.perf_counter()
    episodes = [load(p) for p in files]
    t_load = clock.perf_counter() - t_load
    failures = 0
    start = clock.perf_counter()
    for ep in episodes:
        _, params = analyse(*ep)
        failures += params is None
    total = clock.perf_counter() - start
    return {
        "episodes": len(files),
        "seconds_total": total,
        "seconds_per_episode": total / len(files),
        "seconds_load": t_load,
        "fit_failures": int(failures),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "control": control.__version__,
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--csv-dir", help="time the analysis of every *.csv in this directory")
    ap.add_argument("--generate", type=int, metavar="N", help="write N invented episodes")
    ap.add_argument("--out", help="directory for --generate")
    ap.add_argument("--seed", type=int, default=1, help="generator seed (default 1)")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    args = ap.parse_args()
    if args.generate is None and args.csv_dir is None:
        ap.print_usage(sys.stderr)
        print("give --csv-dir DIR and/or --generate N --out DIR", file=sys.stderr)
        return 2
    if args.generate is not None:
        if not args.out or args.generate < 1:
            print("--generate N needs N >= 1 and --out DIR", file=sys.stderr)
            return 2
        generate(args.generate, args.out, args.seed)
        if args.csv_dir is None:
            if args.json:
                print(json.dumps({"generated": args.generate, "dir": args.out}))
            else:
                print(f"wrote {args.generate} episodes and manifest.json to {args.out}")
            return 0
    result = bench(args.csv_dir)
    if result is None:
        print(f"no *.csv files in {args.csv_dir}", file=sys.stderr)
        return 2
    if args.json:
        print(json.dumps(result))
    else:
        print(f"{result['episodes']} episodes in {result['seconds_total']:.3f} s "
              f"({1e3 * result['seconds_per_episode']:.2f} ms each; step_info + curve_fit; "
              f"{result['fit_failures']} fits failed; CSV parsing {result['seconds_load']:.3f} s "
              "not included)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
