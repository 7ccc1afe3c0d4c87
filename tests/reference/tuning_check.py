#!/usr/bin/env python3
"""Checks the verified PI suggestion (headroom's `analysis::tuning::verify`) against python-control.

Usage:
    python tuning_check.py --cases FILE.json

FILE.json is a list of cases written by the Rust test (tests/it/reference_python.rs), each with
the model (`family` "first_order" with gain K, tau_s, theta_s; "second_order" with gain K,
tau1_s, tau2_s, theta_s; "integrating" with rate k, lag_s, theta_s), the PI in the ideal form
(kc, ti_s), the setpoint step, the band's half-width (PV units), the sample interval and
headroom's results: settling_time_s (last sample outside the band, or null), overshoot_pct and
max_sensitivity. Every case is unsaturated (the actuator's limits far away).

The reference, with python-control only:
  * step response: the closed loop T = C·G/(1 + C·G) with the dead time replaced by its Padé
    approximant of order 10 (`control.pade`), `control.step_response` on the loop's sample times,
    scored by `control.step_info` with `SettlingTimeThreshold` = band/|step| around the final
    value (= the setpoint). step_info's settling time is the first sample after the last one
    outside the band, so headroom's must be exactly one sample earlier: allowed one sample
    either side of that. Overshoot within 1 point.
  * Ms: `control.frequency_response` of the rational part of L = C·G on 400 000 log-spaced
    frequencies, times the exact delay e^(-jωθ), Ms = max |1/(1 + L)|; within 2 %.

Output: one line per case, then a last line exactly `N passed, M failed`.
Exit status: 0 all passed, 1 any failure, 3 a required Python package is missing.
"""

from __future__ import annotations

import argparse
import json
import sys

try:
    import numpy as np
    import control
except ImportError as e:  # pragma: no cover - environment problem
    print(f"missing Python package: {e}", file=sys.stderr)
    sys.exit(3)

PADE_ORDER = 10


def rational_plant(case: dict):
    """The plant without its dead time, and the dead time."""
    s = control.tf("s")
    fam = case["family"]
    if fam == "first_order":
        return case["gain"] / (case["tau_s"] * s + 1), case["theta_s"]
    if fam == "second_order":
        return case["gain"] / ((case["tau1_s"] * s + 1) * (case["tau2_s"] * s + 1)), case["theta_s"]
    if fam == "integrating":
        return case["rate"] / (s * (case["lag_s"] * s + 1)), case["theta_s"]
    raise ValueError(f"unknown family {fam}")


def controller(case: dict):
    s = control.tf("s")
    return case["kc"] * (1 + 1 / (case["ti_s"] * s))


def reference_step(case: dict):
    g, theta = rational_plant(case)
    num, den = control.pade(theta, PADE_ORDER)
    loop = controller(case) * g * control.tf(num, den)
    closed = control.feedback(loop, 1)
    dt = case["sample_s"]
    t = np.arange(0.0, case["horizon_s"] + dt / 2, dt)
    resp = control.step_response(closed, t)
    y = np.squeeze(resp.outputs)
    info = control.step_info(
        y, t, yfinal=1.0, SettlingTimeThreshold=case["band"] / abs(case["step"])
    )
    return info["SettlingTime"], info["Overshoot"]


def reference_ms(case: dict) -> float:
    g, theta = rational_plant(case)
    scale = case["time_scale_s"]
    w = np.logspace(-4, 3, 400_000) / scale
    fr = control.frequency_response(controller(case) * g, w)
    lj = np.squeeze(fr.complex) * np.exp(-1j * w * theta)
    return float(np.max(np.abs(1.0 / (1.0 + lj))))


def check(case: dict) -> tuple[bool, str]:
    dt = case["sample_s"]
    ts_ref, os_ref = reference_step(case)
    ours_ts = case["settling_time_s"]
    problems = []
    if ours_ts is None:
        problems.append("ours did not settle")
    elif abs(ours_ts + dt - ts_ref) > dt * 1.0001:
        problems.append(f"settling {ours_ts:.4g}+{dt:g} vs {ts_ref:.4g}")
    if abs(case["overshoot_pct"] - os_ref) > 1.0:
        problems.append(f"overshoot {case['overshoot_pct']:.3f} vs {os_ref:.3f}")
    ms_ref = reference_ms(case)
    if abs(case["max_sensitivity"] - ms_ref) > 0.02 * ms_ref:
        problems.append(f"Ms {case['max_sensitivity']:.4f} vs {ms_ref:.4f}")
    line = (
        f"{case['name']}: settling {ours_ts} (ref {ts_ref:.4g} - one sample), "
        f"overshoot {case['overshoot_pct']:.3f} (ref {os_ref:.3f}), "
        f"Ms {case['max_sensitivity']:.4f} (ref {ms_ref:.4f})"
    )
    if problems:
        line += "  <- " + "; ".join(problems)
    return not problems, line


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--cases", required=True)
    args = parser.parse_args()
    with open(args.cases, encoding="utf-8") as f:
        cases = json.load(f)
    passed = failed = 0
    for case in cases:
        ok, line = check(case)
        print(("PASS  " if ok else "FAIL  ") + line)
        passed += ok
        failed += not ok
    print(f"{passed} passed, {failed} failed")
    return 0 if failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
