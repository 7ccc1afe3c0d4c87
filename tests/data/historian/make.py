"""Writes the historian-style exports in this folder: one invented loop, written five ways.

Loop TIC-310 at the invented Wrenmoor pilot plant: a first-order process with dead time
(gain 0.8 degC per %, time constant 300 s, dead time 40 s) under a PI controller (gain 1.5
%/degC, integral time 300 s), simulated at 1 s and sampled every 20 s, from 2026-10-24T23:50Z
to 02:20Z, i.e. across the night Berlin's clocks go back (03:00 CEST -> 02:00 CET at 01:00Z).
Run `python3 make.py` here to write the files again.
"""
import datetime as dt
import random

START = dt.datetime(2026, 10, 24, 23, 50, tzinfo=dt.timezone.utc)
SPAN_S = 9000
EVERY_S = 20


def simulate():
    rng = random.Random(310)
    k, tau, theta, kc, ti = 0.8, 300.0, 40.0, 1.5, 300.0
    sp, pv, integral = 50.0, 50.0, 0.0
    bias = 50.0 / k
    op_hist = [bias] * int(theta)
    rows = []
    for t in range(SPAN_S + 1):
        sp = 50.0 if t < 1800 else 55.0 if t < 6000 else 52.0
        err = sp - pv
        integral += err
        op = min(100.0, max(0.0, bias + kc * (err + integral / ti)))
        op_hist.append(op)
        delayed = op_hist[-int(theta) - 1]
        pv += (k * delayed - pv) / tau
        if t % EVERY_S == 0:
            noisy = pv + rng.gauss(0.0, 0.02)
            rows.append((t, sp, round(noisy, 3), round(op, 2)))
    return rows


def berlin(t):
    # Berlin offsets in this span: CEST (+2) before 01:00Z, CET (+1) from then on
    # (EU Directive 2000/84/EC: summer time ends at 01:00 UTC on the last Sunday of October).
    utc = START + dt.timedelta(seconds=t)
    change = dt.datetime(2026, 10, 25, 1, 0, tzinfo=dt.timezone.utc)
    return utc + dt.timedelta(hours=2 if utc < change else 1)


def write(name, header, lines):
    with open(name, "w", newline="") as f:
        f.write(header + "\r\n")
        for line in lines:
            f.write(line + "\r\n")


def main():
    rows = simulate()
    utc = lambda t: (START + dt.timedelta(seconds=t)).strftime("%Y-%m-%dT%H:%M:%SZ")
    write("reference.csv", "time,sp,pv,op",
          [f"{utc(t)},{sp:g},{pv},{op}" for t, sp, pv, op in rows])
    write("local-berlin.csv", "Timestamp,TIC-310.SP,TIC-310.PV,TIC-310.OP",
          [f"{berlin(t):%Y-%m-%d %H:%M:%S},{sp:g},{pv},{op}" for t, sp, pv, op in rows])
    write("day-first.csv", "time,sp,pv,op",
          [f"{berlin(t):%d/%m/%Y %H:%M:%S},{sp:g},{pv},{op}" for t, sp, pv, op in rows])
    epoch_ms = lambda t: int((START + dt.timedelta(seconds=t)).timestamp() * 1000)
    write("epoch-ms.csv", "time,sp,pv,op",
          [f"{epoch_ms(t)},{sp:g},{pv},{op}" for t, sp, pv, op in rows])
    comma = lambda v: str(v).replace(".", ",")
    write("decimal-comma.csv", "time;sp;pv;op",
          [f"{utc(t)};{comma(sp)};{comma(pv)};{comma(op)}" for t, sp, pv, op in rows])


if __name__ == "__main__":
    main()
