"""Evaluation speed of the forward models in :mod:`isoturnover.kinetics`.

Prints evaluations per second of ``TurnoverKinetics.evaluate`` (the unchecked path the
optimizers call) and of ``predict`` (checked), for 30 and 300 sampling times, one to three
parallel pools and the precursor–product chain, under an invented two-switch diet (switch and
switch back), with and without the Jacobian.

Each timing is the median of several repeats of a batch of calls (``time.perf_counter``). So
that numbers can be compared across machines, each is also given relative to a reference run
in the same process: the hand-written one-pool numpy expression
``deq + (d0 - deq) * np.exp(-k * t)`` on the same number of times ("x ref" = model time /
reference time).

Run::

    python benchmarks/bench_kinetics.py [--repeats 7] [--min-time 0.05]
"""

from __future__ import annotations

import argparse
import platform

import numpy as np
from _timing import per_call

from isoturnover.diet import DietHistory
from isoturnover.kinetics import TurnoverKinetics

# Invented diet history: C3 diet, switch to C4 at t = 0, back to C3 at t = 60 (days).
DIET = DietHistory(-26.0, changes=[(0.0, -12.0), (60.0, -26.0)])

MODELS = {
    "1 pool": (TurnoverKinetics(1, diet=DIET), [2.0, 0.08, 1.0]),
    "2 pools": (TurnoverKinetics(2, diet=DIET), [2.0, 0.3, 0.03, 0.4, 0.6]),
    "3 pools": (TurnoverKinetics(3, diet=DIET), [2.0, 0.9, 0.12, 0.015, 0.2, 0.5, 0.3]),
    "chain": (TurnoverKinetics(structure="chain", diet=DIET), [2.0, 0.3, 0.05]),
}


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7, help="timed batches per case (median)")
    ap.add_argument("--min-time", type=float, default=0.05, help="seconds per batch, at least")
    args = ap.parse_args(argv)

    print(f"isoturnover.kinetics evaluation speed; numpy {np.__version__}, "
          f"Python {platform.python_version()}, {platform.machine()}")
    print(f"median of {args.repeats} batches; diet: {DIET}")
    print("x ref = time per call / time of the one-pool numpy expression on the same times\n")
    header = f"{'model':<8} {'n_t':>4} {'call':<9} {'jac':<4} {'evals/s':>11} {'us/call':>9} " \
             f"{'x ref':>7}"
    d0, deq, k = -24.0, -10.0, 0.08
    for n_t in (30, 300):
        t = np.linspace(-5.0, 150.0, n_t)
        ref = per_call(lambda t=t: deq + (d0 - deq) * np.exp(-k * t), args.repeats,
                       args.min_time)
        print(f"reference (one-pool numpy expression), n_t={n_t}: {ref * 1e6:.2f} us/call, "
              f"{1 / ref:,.0f} evals/s")
        print(header)
        for name, (model, theta) in MODELS.items():
            th = np.asarray(theta, dtype=float)
            for call in ("evaluate", "predict"):
                fn = getattr(model, call)
                for jac in (False, True):
                    s = per_call(lambda fn=fn, jac=jac, t=t, th=th: fn(t, th, jacobian=jac),
                                 args.repeats, args.min_time)
                    print(f"{name:<8} {n_t:>4} {call:<9} {'yes' if jac else 'no':<4} "
                          f"{1 / s:>11,.0f} {s * 1e6:>9.1f} {s / ref:>7.1f}")
        print()


if __name__ == "__main__":
    main()
