#!/usr/bin/env python3
"""Peer of `hystd analyze FILE --json` for the benchmark in cmd/hystd
(BenchmarkAnalyzeProcess1M): pandas read_csv and numpy computing the same
figures of a cyclic B-H loop from the same CSV (columns t, H, B in s, A/m, T).

The estimators are the plain ones (linear interpolation at the zero
crossings, the trapezoid rule for the loop area, tips where the sweep
turns); hystd's are local fits with uncertainty budgets, so the two agree to
a fraction of a percent on a clean loop, not to the last digit. Needs the
Debian packages python3-pandas and python3-numpy.

    python3 analyze_pandas.py FILE.csv
"""
import json
import sys

import numpy as np
import pandas as pd

MU0 = 1.25663706212e-6  # H/m (CODATA 2018)


def crossings(x, y, lo, hi):
    """Values of y where x changes sign between samples lo..hi (linear)."""
    x0, x1 = x[lo:hi - 1], x[lo + 1:hi]
    k = np.nonzero((x0 < 0) != (x1 < 0))[0] + lo
    f = -x[k] / (x[k + 1] - x[k])
    return y[k] + f * (y[k + 1] - y[k])


def main(path):
    df = pd.read_csv(path, comment="#", skipinitialspace=True, engine="c")
    h = df["H"].to_numpy(np.float64)
    b = df["B"].to_numpy(np.float64)
    d = np.sign(np.diff(h))
    nz = np.nonzero(d)[0]
    turn = nz[1:][d[nz][1:] != d[nz][:-1]]  # first index after a turn
    tips = turn  # sample at which the direction changed
    if len(tips) < 3:
        sys.exit(f"{path}: fewer than one full cycle")
    top = tips[h[tips] > 0]
    bot = tips[h[tips] <= 0]
    hi_, lo_ = h.max(), h.min()
    offset, centred = 0.0, False
    if abs(h[top].mean() + h[bot].mean()) <= 0.05 * (hi_ - lo_):
        offset, centred = (b[top].mean() + b[bot].mean()) / 2, True
        b = b - offset
    first, ncyc = tips[0], (len(tips) - 1) // 2
    last = tips[2 * ncyc]
    hmax = np.abs(h[tips]).mean()
    bmax = np.abs(b[tips]).mean()
    j = b - MU0 * h
    br = np.abs(crossings(h, b, first, last + 1)).mean()
    hcb = np.abs(crossings(b, h, first, last + 1)).mean()
    hcj = np.abs(crossings(j, h, first, last + 1)).mean()
    hh, bb = h[first:last + 1], b[first:last + 1]
    loss = abs(np.sum(0.5 * (hh[1:] + hh[:-1]) * np.diff(bb))) / ncyc
    q2 = (hh < 0) & (bb > 0)
    q4 = (hh > 0) & (bb < 0)
    bhmax = (np.max(-hh[q2] * bb[q2]) + np.max(-hh[q4] * bb[q4])) / 2
    print(json.dumps({
        "hmax_a_m": hmax, "bmax_t": bmax, "br_t": br, "hcb_a_m": hcb,
        "hcj_a_m": hcj, "mu_a": bmax / (MU0 * hmax), "loss_j_m3": loss,
        "bhmax_j_m3": bhmax, "centred": centred, "b_offset_t": offset,
    }))


if __name__ == "__main__":
    main(sys.argv[1])
