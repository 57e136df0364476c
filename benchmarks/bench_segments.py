"""Cost of a segment fit relative to a point fit on the same number of samples.

Invented series (seeded Gaussian noise, σ = 0.1 ‰): a switch at t = 0 from δ0 = −22 ‰ to
δ_eq = −16 ‰, sampled 120 d later.

* segments: 40 segments of 2 mm from the base of an 80 mm whisker growing 0.5 mm/d
  (formation intervals of 4 d from −40 to 120 d), ``TurnoverModel(record="segments")``;
* points: 40 samples at the same formation midpoints, ``TurnoverModel()``;

for one pool (half-life 15 d), two pools (6 and 45 d, fractions 0.4/0.6) and the chain
(k1 = 0.3, k2 = 0.05 /d). Timed: ``fit`` (automatic starts, multi-start, covariance, trust
notes; ``warn=False``), one evaluation of the forward model with its Jacobian, and a fit with
the profile intervals of the rates (``conf_int``). Each time is the fastest batch over
repeats, the candidates taking turns, all in this process; the table gives the ratio
segment / point, so the numbers travel across machines.

Run::

    python benchmarks/bench_segments.py [--repeats 5] [--min-time 0.2]
"""

from __future__ import annotations

import argparse
import math
import platform

import numpy as np
from _timing import interleaved

import isoturnover as iso
from isoturnover.kinetics import TurnoverKinetics
from isoturnover.segments import SegmentKinetics, formation_intervals, segment_means

LN2 = math.log(2.0)
A = np.arange(0.0, 80.0, 2.0)
B = A + 2.0
T_SAMPLE, G_RATE = 120.0, 0.5

CASES = {
    "1 pool": (dict(pools=1), [-22.0, -16.0, LN2 / 15.0, 1.0]),
    "2 pools": (dict(pools=2), [-22.0, -16.0, LN2 / 6.0, LN2 / 45.0, 0.4, 0.6]),
    "chain": (dict(structure="chain"), [-22.0, -16.0, 0.3, 0.05]),
}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--min-time", type=float, default=0.2)
    args = ap.parse_args(argv)
    print(f"python {platform.python_version()}, numpy {np.__version__}, "
          f"isoturnover {iso.__version__}")
    t1, t2 = formation_intervals(A, B, T_SAMPLE, G_RATE)
    mid = (t1 + t2) / 2.0
    rng = np.random.default_rng(2026)
    print(f"{'case':<9}{'fit':>8}{'evaluate+J':>12}{'fit+profiles':>14}   (segment / point)")
    for label, (opts, theta) in CASES.items():
        theta = np.asarray(theta)
        kin = TurnoverKinetics(**opts)
        y_seg = segment_means(kin, theta, t1, t2) + rng.normal(0.0, 0.1, A.size)
        y_pt = kin.evaluate(mid, theta) + rng.normal(0.0, 0.1, A.size)
        seg_model = iso.TurnoverModel(**opts, record="segments", growth_rate=G_RATE)
        pt_model = iso.TurnoverModel(**opts)
        seg_kin = SegmentKinetics(kin, t1, t2)
        rates = list(kin.rate_names)

        def seg_fit(m=seg_model, y=y_seg):
            return m.fit(T_SAMPLE, y, segment_start=A, segment_end=B, warn=False)

        def pt_fit(m=pt_model, y=y_pt):
            return m.fit(mid, y, warn=False)

        fns = {
            "seg fit": seg_fit,
            "pt fit": pt_fit,
            "seg eval": lambda k=seg_kin, th=theta: k.evaluate(mid, th, jacobian=True),
            "pt eval": lambda k=kin, th=theta: k.evaluate(mid, th, jacobian=True),
            "seg prof": lambda f=seg_fit, r=rates: f().conf_int(params=r),
            "pt prof": lambda f=pt_fit, r=rates: f().conf_int(params=r),
        }
        best = interleaved(fns, args.repeats, args.min_time)
        print(f"{label:<9}{best['seg fit'] / best['pt fit']:>8.2f}"
              f"{best['seg eval'] / best['pt eval']:>12.2f}"
              f"{best['seg prof'] / best['pt prof']:>14.2f}")


if __name__ == "__main__":
    main()
