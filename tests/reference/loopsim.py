"""Closed-loop episode generator shared by the reference checks and the speed comparison.

Every response here is invented for testing: a first-order-plus-dead-time process

    G(s) = K e^(-theta s) / (tau s + 1),   steady state  PV = offset + K * OP,

under a discrete PI controller (proportional and integral both on the error e = SP - PV), with the
actuator clamped to [op_min, op_max] and anti-windup by conditional integration (the integral is
frozen while the output is clamped and the error pushes further into the clamp).

The process is simulated exactly between controller scans: the OP is held between scans, so the
zero-order-hold solution y <- a*y + (1 - a)*(offset + K*u_delayed), a = exp(-scan/tau), has no
integration error. The dead time is rounded to a whole number of scans. The controller scan is
finer than (or equal to) the logging sample time, and the log keeps every `sample_s / scan_s`-th
scan: time, SP, the measured PV the controller saw at that scan, and the OP it then wrote.

Measurement noise (Gaussian, sigma given as a percentage of |step|) is added to the PV that the
controller reads and that is logged; the noise-free process output of the same run is kept as
`pv_true` for reference computations.

Every episode starts in steady state at the old setpoint, has one setpoint step at `step_s`, and
runs for `post_s` seconds after it. CSV columns: `time,sp,pv,op` with time in seconds.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class LoopCase:
    """One invented loop and one setpoint step."""

    name: str
    gain: float  # K, PV units per % OP (negative: more OP lowers the PV)
    tau_s: float  # process time constant
    theta_s: float  # process dead time (rounded to whole scans)
    offset: float  # PV in steady state at OP = 0
    kc: float  # controller gain, % OP per PV unit (same sign as gain)
    ti_s: float  # integral time
    sp_from: float
    sp_to: float
    op_min: float = 0.0
    op_max: float = 100.0
    sample_s: float = 1.0  # logging sample time
    scan_s: float = 0.1  # controller scan (and simulation step); must divide sample_s
    pre_s: float = 60.0  # steady state logged before the step
    post_s: float = 600.0  # logged after the step
    step_offset_s: float = 0.0  # step this far after a logged sample (0: on a sample)
    noise_pct: float = 0.0  # measurement noise sigma, % of |sp_to - sp_from|
    seed: int = 0
    settle_within_s: float = 300.0  # spec passed to the analyser (affects only the verdict)

    @property
    def delta(self) -> float:
        return self.sp_to - self.sp_from

    @property
    def step_s(self) -> float:
        """Time of the setpoint change (the controller sees it from this scan on)."""
        return self.pre_s + self.step_offset_s


@dataclass
class Episode:
    case: LoopCase
    time: np.ndarray
    sp: np.ndarray
    pv: np.ndarray  # as measured (with noise, if any)
    op: np.ndarray
    pv_true: np.ndarray  # noise-free process output at the same instants
    theta_eff_s: float  # dead time actually simulated (rounded to scans)
    step_index: int  # first logged sample that shows the new setpoint

    def write_csv(self, path) -> None:
        data = np.column_stack([self.time, self.sp, self.pv, self.op])
        # 12 significant digits: far below any tolerance used in the checks.
        np.savetxt(path, data, delimiter=",", header="time,sp,pv,op", comments="", fmt="%.12g")


def _ticks(value_s: float, scan_s: float, what: str, exact: bool = True) -> int:
    n = value_s / scan_s
    k = int(round(n))
    if exact and abs(n - k) > 1e-9 * max(1.0, n):
        raise ValueError(f"{what} = {value_s} s is not a whole number of scans ({scan_s} s)")
    return k


def simulate(case: LoopCase) -> Episode:
    """Simulates one episode of `case` (deterministic for a given case, including its seed)."""
    if case.gain == 0 or case.kc == 0 or case.gain * case.kc < 0:
        raise ValueError(f"{case.name}: controller gain must be non-zero with the process gain's sign")
    scan = case.scan_s
    log_every = _ticks(case.sample_s, scan, "sample_s")
    pre = _ticks(case.pre_s, scan, "pre_s")
    post = _ticks(case.post_s, scan, "post_s")
    step_tick = pre + _ticks(case.step_offset_s, scan, "step_offset_s")
    delay = _ticks(case.theta_s, scan, "theta_s", exact=False)
    n_ticks = pre + post + 1

    u0 = (case.sp_from - case.offset) / case.gain
    if not case.op_min <= u0 <= case.op_max:
        raise ValueError(f"{case.name}: steady OP {u0:.3f} outside [{case.op_min}, {case.op_max}]")

    a = math.exp(-scan / case.tau_s)
    ki = case.kc * scan / case.ti_s  # integral increment per scan per unit error
    sigma = case.noise_pct / 100.0 * abs(case.delta)
    rng = np.random.default_rng(case.seed)
    noise = rng.normal(0.0, sigma, n_ticks) if sigma > 0 else np.zeros(n_ticks)

    y = case.sp_from  # steady state: PV on the old setpoint, integral holding u0
    integral = u0
    u_hist = np.full(n_ticks + delay + 1, u0)  # u_hist[k + delay] = OP written at tick k

    n_log = (n_ticks - 1) // log_every + 1
    t_log = np.empty(n_log)
    sp_log = np.empty(n_log)
    pv_log = np.empty(n_log)
    op_log = np.empty(n_log)
    true_log = np.empty(n_log)

    j = 0
    for k in range(n_ticks):
        sp = case.sp_to if k >= step_tick else case.sp_from
        meas = y + noise[k]
        e = sp - meas
        trial = integral + ki * e
        u_trial = case.kc * e + trial
        # Conditional integration: keep the old integral when the output is clamped and this
        # error would push it further into the clamp.
        if (u_trial > case.op_max and ki * e > 0) or (u_trial < case.op_min and ki * e < 0):
            trial = integral
        integral = trial
        u = min(max(case.kc * e + integral, case.op_min), case.op_max)
        u_hist[k + delay] = u
        if k % log_every == 0:
            t_log[j] = k * scan
            sp_log[j] = sp
            pv_log[j] = meas
            op_log[j] = u
            true_log[j] = y
            j += 1
        # Exact zero-order-hold step over one scan with the delayed OP.
        u_delayed = u_hist[k]
        y = a * y + (1.0 - a) * (case.offset + case.gain * u_delayed)

    t_log = np.round(t_log, 9)
    step_index = int(np.nonzero(sp_log != case.sp_from)[0][0])
    return Episode(case, t_log, sp_log, pv_log, op_log, true_log, delay * scan, step_index)


def simc_pi(gain: float, tau_s: float, theta_s: float, tau_c_s: float) -> tuple[float, float]:
    """PI settings by the SIMC rule (REFERENCES section 3): Kc = tau/(K(tau_c + theta)),
    Ti = min(tau, 4(tau_c + theta)). Used only to make plausible invented loops."""
    kc = tau_s / (gain * (tau_c_s + theta_s))
    ti = min(tau_s, 4.0 * (tau_c_s + theta_s))
    return kc, ti


def random_cases(n: int, seed: int = 1) -> list[LoopCase]:
    """`n` varied invented episodes for speed comparisons (not for accuracy checks)."""
    rng = np.random.default_rng(seed)
    cases = []
    for i in range(n):
        tau = float(rng.choice([5.0, 10.0, 20.0, 40.0, 80.0, 150.0, 300.0]))
        sample = max(s for s in (0.1, 0.5, 1.0, 2.0, 5.0) if s <= tau / 20.0 or s == 0.1)
        scan = 0.1 if sample <= 1.0 else 0.5
        theta = round(float(rng.uniform(0.05, 0.3)) * tau / scan) * scan
        gain = float(rng.uniform(0.3, 3.0)) * float(rng.choice([1.0, -1.0]))
        tau_c = float(rng.uniform(0.5, 3.0)) * max(theta, scan)
        kc, ti = simc_pi(gain, tau, theta, tau_c)
        u0 = float(rng.uniform(25.0, 60.0))
        offset = float(rng.uniform(-20.0, 200.0))
        sp_from = round(offset + gain * u0, 3)
        delta = float(rng.uniform(-20.0, 20.0)) * abs(gain)
        if abs(delta) < 1.0 * abs(gain):
            delta = abs(gain) * 5.0
        settle_guess = theta + 4.0 * tau_c
        post = math.ceil(max(15.0 * (tau_c + theta), 4.0 * tau) / sample) * sample
        cases.append(
            LoopCase(
                name=f"bench_{i:05d}",
                gain=gain,
                tau_s=tau,
                theta_s=theta,
                offset=offset,
                kc=kc,
                ti_s=ti,
                sp_from=sp_from,
                sp_to=round(sp_from + delta, 3),
                sample_s=sample,
                scan_s=scan,
                pre_s=20.0 * sample,
                post_s=post,
                noise_pct=float(rng.choice([0.0, 0.2])),
                seed=seed * 100003 + i,
                settle_within_s=round(1.5 * settle_guess, 1),
            )
        )
    return cases


def case_dict(case: LoopCase) -> dict:
    return dataclasses.asdict(case)
