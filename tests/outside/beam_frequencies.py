#!/usr/bin/env python3
"""Clamped-free uniform Euler-Bernoulli beam: the first three roots beta_n L of

    1 + cos(beta L) cosh(beta L) = 0,

so that omega_n = (beta_n L)^2 sqrt(EI / (rho L^4)) with rho the mass per length.

Roots are found with mpmath.findroot at 30 digits (started from brentq brackets)
and cross-checked with scipy.optimize.brentq in double precision on the
equivalent, better-scaled form cos(x) + 1/cosh(x) = 0.

Writes beam_frequencies.json next to this file.
"""
import json
import math
import os

import mpmath as mp
import scipy
from scipy.optimize import brentq

DPS = 30
# exactly one root in each bracket ((n - 1) pi, n pi) for n = 1, 2, 3
# (cos x + 1/cosh x changes sign once there, near (n - 1/2) pi)
BRACKETS = [(0.0, math.pi), (math.pi, 2 * math.pi), (2 * math.pi, 3 * math.pi)]


def main():
    f_double = lambda x: math.cos(x) + 1.0 / math.cosh(x)
    roots = []
    src = (f"mpmath {mp.__version__} findroot (secant, mp.dps={DPS}) on "
           f"1 + cos(x) cosh(x) = 0; cross-checked with SciPy {scipy.__version__} "
           f"scipy.optimize.brentq on cos(x) + 1/cosh(x) = 0")
    with mp.workdps(DPS):
        f_mp = lambda x: 1 + mp.cos(x) * mp.cosh(x)
        for n, (lo, hi) in enumerate(BRACKETS, start=1):
            r_sc = brentq(f_double, lo, hi, xtol=1e-15, rtol=8.9e-16,
                          maxiter=200)
            r_mp = mp.findroot(f_mp, mp.mpf(r_sc))
            assert lo < r_mp < hi
            diff = abs(float(r_mp) - r_sc)
            assert diff < 1e-13, (n, r_mp, r_sc)
            resid = f_mp(r_mp)
            print(f"n={n}: beta_n L = {mp.nstr(r_mp, 25)}  (brentq {r_sc!r}, "
                  f"diff {diff:.1e}); (beta_n L)^2 = {mp.nstr(r_mp**2, 20)}; "
                  f"residual {mp.nstr(resid, 3)}")
            roots.append(dict(n=n,
                              beta_L=float(r_mp),
                              beta_L_str=mp.nstr(r_mp, 25),
                              beta_L_squared=float(r_mp ** 2),
                              beta_L_squared_str=mp.nstr(r_mp ** 2, 25),
                              source=f"{src}; agreement {diff:.1e}"))
    out = dict(
        description=("Clamped-free uniform Euler-Bernoulli beam, roots beta_n L of "
                     "1 + cos(bL) cosh(bL) = 0; omega_n = beta_L_squared * "
                     "sqrt(EI/(rho L^4)) with rho the mass per unit length."),
        versions=dict(scipy=scipy.__version__, mpmath=mp.__version__),
        roots=roots)
    path = os.path.splitext(os.path.abspath(__file__))[0] + '.json'
    with open(path, 'w') as fh:
        json.dump(out, fh, indent=2)
    print(f"wrote {path}")


if __name__ == '__main__':
    main()
