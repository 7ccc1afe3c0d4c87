#!/usr/bin/env python3
"""Checks headroom's minimum-variance (Harris) index against an independent computation with
statsmodels and scipy.

Usage:
    python harris_check.py --cases FILE.json

FILE.json is a list of cases written by the Rust test (tests/it/regulation_reference.rs), each
with `holds` (lists of PV − SP over each held-setpoint stretch, in order), the AR `order`, the
model's `dead_time_s`, the `sample_s` interval and headroom's `eta`.

The reference, following Harris (1989) with the Huang & Shah normalisation (shared
REFERENCES.md §4): each hold's deviation has its own mean removed and only holds longer than
4 × order samples are kept; an AR(order) model without constant is fitted by least squares to
the holds pooled (the regression rows of every hold stacked: statsmodels `OLS` on `lagmat`; for a
single hold also statsmodels `AutoReg`, which must agree); σ²_a is the residual sum of squares
over the number of regression rows; ψ is the impulse response of 1/A(q⁻¹) up to the dead time,
d = ⌊θ/Ts⌋ + 1 samples (scipy.signal.dimpulse, checked against statsmodels' `arma2ma`);
σ²_mv = σ²_a·Σ ψ²; σ²_y the mean square of the pooled deviations; η = σ²_mv/σ²_y clipped to
[0, 1]. The estimator is the same least squares as headroom's, so the two must agree to 1e-6.

Prints a line per case and, last, `N passed, M failed`; exits with 0 when every case passes, 1
on any failure and 3 when statsmodels, scipy or numpy is missing.
"""

from __future__ import annotations

import argparse
import json
import math
import sys

try:
    import numpy as np
    from scipy import signal
    from statsmodels.regression.linear_model import OLS
    from statsmodels.tsa.ar_model import AutoReg
    from statsmodels.tsa.arima_process import ArmaProcess
    from statsmodels.tsa.tsatools import lagmat
except ImportError as e:  # pragma: no cover - environment problem
    print(f"missing Python package: {e}", file=sys.stderr)
    sys.exit(3)

TOLERANCE = 1e-6


def pooled_ar(holds: list[np.ndarray], order: int) -> tuple[np.ndarray, float]:
    """AR coefficients and residual variance of the holds pooled (least squares, no constant)."""
    xs, ys = [], []
    for y in holds:
        x = lagmat(y, order, trim="both")
        xs.append(x)
        ys.append(y[order:])
    fit = OLS(np.concatenate(ys), np.vstack(xs)).fit()
    n_rows = sum(len(y) for y in ys)
    return np.asarray(fit.params), float(fit.ssr) / n_rows


def impulse(a: np.ndarray, d: int) -> np.ndarray:
    """ψ_0 … ψ_{d−1} of 1/(1 − Σ a_i q^−i)."""
    num = np.r_[1.0, np.zeros(len(a))]
    den = np.r_[1.0, -a]
    # dimpulse wants at least two samples; the first d are ψ_0 … ψ_{d−1}.
    _, (h,) = signal.dimpulse((num, den, 1.0), n=max(d, 2))
    psi = h.ravel()[:d]
    check = ArmaProcess(ar=den, ma=[1.0]).arma2ma(d)
    if not np.allclose(psi, check, rtol=1e-9, atol=1e-12):
        raise RuntimeError(f"dimpulse and arma2ma disagree: {psi} vs {check}")
    return psi


def eta_of(case: dict) -> tuple[float, str]:
    order = int(case["order"])
    holds = [np.asarray(h, dtype=float) for h in case["holds"]]
    holds = [h - h.mean() for h in holds if len(h) > 4 * order]
    a, var_a = pooled_ar(holds, order)
    note = f"{len(holds)} hold(s)"
    if len(holds) == 1:
        ar = AutoReg(holds[0], lags=order, trend="n").fit()
        if not (np.allclose(ar.params, a, rtol=1e-8, atol=1e-10) and math.isclose(ar.sigma2, var_a, rel_tol=1e-8)):
            raise RuntimeError("AutoReg and the pooled least squares disagree on one hold")
        note += ", AutoReg agrees"
    d = math.floor(case["dead_time_s"] / case["sample_s"]) + 1
    psi = impulse(a, d)
    var_y = float(np.mean(np.concatenate(holds) ** 2))
    eta = min(max(var_a * float(np.sum(psi**2)) / var_y, 0.0), 1.0)
    return eta, f"{note}, d = {d}"


def check(case: dict) -> tuple[bool, str]:
    """Whether headroom's index matches the reference, and a line saying so."""
    try:
        eta, note = eta_of(case)
    except Exception as e:  # a case the reference cannot compute is a failure, not a skip
        return False, f"{case['name']}: {e}"
    line = f"{case['name']}: headroom {case['eta']:.8f}, reference {eta:.8f} ({note})"
    return abs(eta - case["eta"]) <= TOLERANCE, line


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", required=True, type=argparse.FileType(encoding="utf-8"))
    results = [check(case) for case in json.load(parser.parse_args().cases)]
    for ok, line in results:
        print(f"{'PASS' if ok else 'FAIL'}  {line}")
    passed = sum(ok for ok, _ in results)
    print(f"{passed} passed, {len(results) - passed} failed")
    return 0 if passed == len(results) else 1


if __name__ == "__main__":
    sys.exit(main())
