#!/usr/bin/env python3
"""Analytic B–H loops for `hystd analyze`, with their exact figures.

Written independently of calib/loop: the exact figures come from the
formulas below evaluated with mpmath at 40 significant digits (roots by
findroot, the loss by quad, the maximum of −H·B by a root of its
derivative). Run from this directory: python3 gen.py (needs mpmath, a
general-purpose arbitrary-precision library). It writes CASE.csv and
exact.json (the figures of every case, SI units).

Loops (falling branch J_f(H); the rising branch is J_r(H) = −J_f(−H), so
both branches give the same magnitudes; B = J + μ0·H, μ0 = 4π·1e-7 as in
hystd's calib/units (CODATA 2018 value 1.25663706212e-6 differs by 1e-10
relative, far below every tolerance)):

  arctan:   g(H) = (2·Js/π)·atan((H + Hc)/a)
  Langevin: g(H) = Js·L((H + Hc)/a), L(x) = coth x − 1/x
  J_f(H) = g(H) − d·(H + Hm)/(2·Hm), d = g(Hm) + g(−Hm):
  the small linear term closes the loop at both tips exactly
  (J_f(Hm) = J_r(Hm), J_f(−Hm) = J_r(−Hm)).

  magnet (straight line with a curved knee):
  J_f(H) = max(Js + μ0(μrec−1)·H − c·max(0, −H − H1)², −Js + μ0(μrec−1)·H)
  straight with slope μ0·μrec in B for H ≥ −H1, so μ_rec = 1.05 exactly
  over any recoil range inside it; HcB = Js/(μ0·μrec) and
  (BH)max = Js²/(4·μ0·μrec) at H = −Js/(2·μ0·μrec) (both on the line);
  HcJ and Hk on the quadratic knee (roots below).

Exact figures of a loop swept between ±Hm:
  Hmax = Hm; Bmax = J_f(Hm) + μ0·Hm; μa = Bmax/(μ0·Hm);
  Br = J_f(0); HcB: J_f(H) + μ0·H = 0; HcJ: J_f(H) = 0;
  Hk: J_f(H) = 0.9·J_f(0) (H < 0);
  loss W = ∮H dB = ∫_{−Hm}^{Hm} (J_f − J_r) dH (the μ0·H parts cancel);
  (BH)max = max over −HcB ≤ H ≤ 0 of −H·(J_f(H) + μ0·H).
"""
import json
import math
import random

import mpmath as mp

mp.mp.dps = 40
MU0 = 4 * mp.pi * mp.mpf("1e-7")
OE = mp.mpf(1000) / (4 * mp.pi)  # A/m per Oe (NBS SP 696)


class Arctan:
    kind = "arctan"

    def __init__(s, Js, Hc, a, Hm):
        s.Js, s.Hc, s.a, s.Hm = map(mp.mpf, (Js, Hc, a, Hm))
        s.d = s.g(s.Hm) + s.g(-s.Hm)

    def g(s, h):
        return 2 * s.Js / mp.pi * mp.atan((h + s.Hc) / s.a)

    def Jf(s, h):
        return s.g(h) - s.d * (h + s.Hm) / (2 * s.Hm)

    breaks = property(lambda s: [-s.Hm, -s.Hc, 0, s.Hc, s.Hm])


class Langevin(Arctan):
    kind = "Langevin"

    def g(s, h):
        x = (h + s.Hc) / s.a
        if abs(x) < mp.mpf("1e-8"):
            return s.Js * x / 3
        return s.Js * (mp.coth(x) - 1 / x)


class Magnet:
    kind = "magnet"

    def __init__(s, Js, murec, H1, c, Hm):
        s.Js, s.murec, s.H1, s.c, s.Hm = map(mp.mpf, (Js, murec, H1, c, Hm))

    def Jf(s, h):
        lin = MU0 * (s.murec - 1) * h
        k = max(mp.mpf(0), -h - s.H1)
        return max(s.Js + lin - s.c * k * k, -s.Js + lin)

    @property
    def breaks(s):
        # the knee, and where the clip at −Js takes over (on either branch)
        hx = mp.findroot(lambda h: 2 * s.Js - s.c * (-h - s.H1) ** 2, -s.H1 - mp.sqrt(2 * s.Js / s.c))
        return sorted([-s.Hm, -s.H1, hx, 0, -hx, s.H1, s.Hm])


def Jr(m, h):
    return -m.Jf(-h)


def B(m, h, rising=False):
    return (Jr(m, h) if rising else m.Jf(h)) + MU0 * h


def root(f, lo, hi):
    return mp.findroot(f, (mp.mpf(lo), mp.mpf(hi)), solver="anderson")


def exact(m):
    Hm = m.Hm
    br = m.Jf(0)
    # bracket the crossings on a grid, then solve
    def bracket(f):
        n = 4000
        xs = [-Hm * i / n for i in range(n + 1)]
        for x0, x1 in zip(xs, xs[1:]):
            if f(x0) * f(x1) <= 0:
                return root(f, x1, x0)
        return None
    hcb = bracket(lambda h: m.Jf(h) + MU0 * h)
    hcj = bracket(lambda h: m.Jf(h))
    hk = bracket(lambda h: m.Jf(h) - mp.mpf("0.9") * br)
    bm = m.Jf(Hm) + MU0 * Hm
    loss = mp.quad(lambda h: m.Jf(h) - Jr(m, h), m.breaks)
    p = lambda h: -h * (m.Jf(h) + MU0 * h)
    # maximum of p on [hcb, 0]: grid, then the root of p' near the best node
    n = 4000
    xs = [hcb * i / n for i in range(n + 1)]
    i = max(range(len(xs)), key=lambda k: p(xs[k]))
    lo, hi = xs[min(i + 1, n)], xs[max(i - 1, 0)]
    dp = lambda h: mp.diff(p, h)
    hb = mp.findroot(dp, (lo, hi), solver="anderson")
    out = {"hmax_a_m": Hm, "bmax_t": bm, "br_t": br, "hcb_a_m": -hcb, "hcj_a_m": -hcj,
           "mu_a": bm / (MU0 * Hm), "loss_j_m3": loss, "bhmax_j_m3": p(hb), "hk_a_m": -hk if hk is not None else None}
    if isinstance(m, Magnet):
        out["mu_rec"] = m.murec
    return {k: (float(v) if v is not None else None) for k, v in out.items()}


def sweep(m, per_cycle, cycles, start="tip-fall", uneven=0.0, noise=(0.0, 0.0), seed=1, offset=0.0):
    """Triangular sweep between ±Hm. Phase u counts branches: branch k spans
    [k, k+1), even k falling from +Hm. start: tip-fall (u from 0), tip-rise
    (u from 1), zero-fall (u from 0.5), zero-rise (u from 1.5)."""
    rnd = random.Random(seed)
    u0 = {"tip-fall": 0.0, "tip-rise": 1.0, "zero-fall": 0.5, "zero-rise": 1.5}[start]
    du = 2.0 / per_cycle
    rows = []
    u, t = u0, 0.0
    end = u0 + 2 * cycles
    Hm = float(m.Hm)
    while True:
        if u > end + 1e-9:
            # the sweep stops at its programmed end: a last sample there
            # when the uneven steps overshot it
            if uneven and rows and abs(u_prev - end) > 1e-9:
                t = t_prev + (end - u_prev) / du * 1e-3
                u = end
            else:
                break
        u_prev, t_prev = u, t
        k = math.floor(u + 1e-12)
        f = u - k
        if f < 1e-12:
            f = 0.0
        falling = k % 2 == 0
        h = mp.mpf(Hm) * (1 - 2 * mp.mpf(f)) if falling else mp.mpf(Hm) * (-1 + 2 * mp.mpf(f))
        b = B(m, h, rising=not falling)
        hn = float(h) + (rnd.gauss(0, noise[0]) if noise[0] else 0.0)
        bn = float(b) + offset + (rnd.gauss(0, noise[1]) if noise[1] else 0.0)
        rows.append((t, hn, bn))
        if u == end:
            break
        j = 1 + uneven * (2 * rnd.random() - 1) if uneven else 1.0
        u += du * j
        t += 1e-3 * j
    return rows


def write(name, rows, header="t,H,B", conv=(1.0, 1.0), sep=",", comment=""):
    with open(name + ".csv", "w") as f:
        if comment:
            f.write("# " + comment + "\n")
        f.write(header + "\n")
        for t, h, b in rows:
            f.write(sep.join((repr(t), repr(float(h / conv[0]) if conv[0] != 1 else h),
                              repr(float(b / conv[1]) if conv[1] != 1 else b))) + "\n")


def main():
    at = Arctan(1.6, 80, 30, 2000)
    la = Langevin(1.2, 40, 15, 1500)
    mg = Magnet(1.3, 1.05, 1.0e6, 1.2309e-10, 2.4e6)
    ex = {"arctan": exact(at), "Langevin": exact(la), "magnet": exact(mg)}
    cases = {}

    def case(name, model, rows, **kw):
        write(name, rows, **kw)
        cases[name] = model

    for n in (200, 600, 50000):
        case("atan-%d" % n, "arctan", sweep(at, n, 1), comment="arctan loop, %d points per cycle (gen.py)" % n)
        case("lang-%d" % n, "Langevin", sweep(la, n, 1), comment="Langevin loop, %d points per cycle (gen.py)" % n)
    case("atan-uneven", "arctan", sweep(at, 600, 1, uneven=0.4, seed=3), comment="arctan loop, steps ±40 %")
    case("lang-uneven", "Langevin", sweep(la, 600, 1, uneven=0.4, seed=4), comment="Langevin loop, steps ±40 %")
    case("atan-noise", "arctan", sweep(at, 4000, 2, uneven=0.2, noise=(0.2, 5e-4), seed=5),
         comment="arctan loop with noise: sigma H 0.2 A/m, sigma B 0.5 mT")
    case("atan-1.5-fall", "arctan", sweep(at, 600, 1.5, start="tip-fall"), comment="1.5 cycles from the top tip")
    case("atan-1.5-rise", "arctan", sweep(at, 600, 1.5, start="tip-rise"), comment="1.5 cycles from the bottom tip")
    case("atan-3.25-fall", "arctan", sweep(at, 600, 3.25, start="zero-fall"), comment="3.25 cycles from H = 0 on the falling branch")
    case("atan-3.25-rise", "arctan", sweep(at, 600, 3.25, start="zero-rise"), comment="3.25 cycles from H = 0 on the rising branch")
    case("atan-offset", "arctan", sweep(at, 600, 1, offset=0.03), comment="arctan loop with B offset +0.03 T")
    rows = sweep(at, 600, 1)
    case("atan-cgs", "arctan", rows, conv=(float(OE), 1e-4), comment="arctan loop in Oe and G")
    case("atan-koe-kg", "arctan", rows, conv=(float(OE) * 1000, 0.1), header="t (s);H (kOe);B [kG]", sep=";",
         comment="arctan loop in kOe and kG, units in the header, ';' separators")
    case("magnet", "magnet", sweep(mg, 2000, 1), comment="straight-line magnet, mu_rec 1.05, quadratic knee")
    with open("exact.json", "w") as f:
        json.dump({"models": ex, "cases": cases}, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
