#!/usr/bin/env python3
"""Large-deflection cantilever (inextensible Euler-Bernoulli elastica).

Clamped at the origin with its axis along +x, loaded at the free end by a force
of constant direction +y and magnitude P. Length L, bending stiffness EI,
load parameter alpha = P L^2 / EI. Arc length is normalised, s in [0, 1]:

    theta'' = -alpha cos(theta),  theta(0) = 0,  theta'(1) = 0,
    x' = cos(theta),  y' = sin(theta).

Two independent computations, required to agree to 1e-10:

(a) elliptic-integral closed form. With theta0 the tip angle,
    k^2 = (1 + sin theta0)/2 and sin(phi1) = 1/(k sqrt 2):
        sqrt(alpha)    = K(k) - F(phi1, k)                 (solved for theta0)
        x_tip / L      = sqrt(2 sin(theta0) / alpha)
        y_tip / L      = 1 - 2 (E(k) - E(phi1, k)) / sqrt(alpha)
        kappa(0) L     = sqrt(2 alpha sin(theta0))
    evaluated with mpmath (ellipf / ellipe, 40 digits, findroot) and again
    with scipy.special.ellipk/ellipkinc/ellipe/ellipeinc + brentq.
(b) shooting on the ODE with scipy.integrate.solve_ivp (DOP853) and brentq on
    the unknown base curvature theta'(0).

Writes elastica.json next to this file.
"""
import json
import math
import os

import mpmath as mp
import numpy as np
import scipy
from scipy.integrate import solve_ivp
from scipy.optimize import brentq
from scipy.special import ellipe, ellipeinc, ellipk, ellipkinc

ALPHAS = [0.25, 0.5, 1.0, 2.0, 3.0, 5.0]
TOL = 1e-10
RTOL_ODE = 1e-13
ATOL_ODE = 1e-15


# ---------------------------------------------------------------- (a) mpmath
def closed_form_mpmath(alpha, dps=40):
    with mp.workdps(dps):
        alpha = mp.mpf(alpha)

        def parts(theta0):
            m = (1 + mp.sin(theta0)) / 2          # parameter m = k^2
            phi1 = mp.asin(1 / mp.sqrt(2 * m))
            return m, phi1

        def residual(theta0):
            m, phi1 = parts(theta0)
            return mp.ellipk(m) - mp.ellipf(phi1, m) - mp.sqrt(alpha)

        # bracket: residual(0) = -sqrt(alpha) < 0 and -> +inf as theta0 -> pi/2
        lo, hi = mp.mpf('1e-30'), mp.pi / 2 - mp.mpf('1e-30')
        for _ in range(60):                      # safe bisection to ~1e-18
            mid = (lo + hi) / 2
            if residual(mid) < 0:
                lo = mid
            else:
                hi = mid
        theta0 = mp.findroot(residual, (lo + hi) / 2)  # polish with secant
        m, phi1 = parts(theta0)
        x = mp.sqrt(2 * mp.sin(theta0) / alpha)
        y = 1 - 2 * (mp.ellipe(m) - mp.ellipe(phi1, m)) / mp.sqrt(alpha)
        kappa0 = mp.sqrt(2 * alpha * mp.sin(theta0))
        return dict(x=x, y=y, theta=theta0, kappa0=kappa0,
                    residual=residual(theta0))


# ----------------------------------------------------------------- (a) scipy
def closed_form_scipy(alpha):
    def parts(theta0):
        m = (1.0 + math.sin(theta0)) / 2.0
        phi1 = math.asin(1.0 / math.sqrt(2.0 * m))
        return m, phi1

    def residual(theta0):
        m, phi1 = parts(theta0)
        return ellipk(m) - ellipkinc(phi1, m) - math.sqrt(alpha)

    theta0 = brentq(residual, 1e-15, math.pi / 2 - 1e-12, xtol=1e-16,
                    rtol=4 * np.finfo(float).eps, maxiter=500)
    m, phi1 = parts(theta0)
    x = math.sqrt(2.0 * math.sin(theta0) / alpha)
    y = 1.0 - 2.0 * (ellipe(m) - ellipeinc(phi1, m)) / math.sqrt(alpha)
    kappa0 = math.sqrt(2.0 * alpha * math.sin(theta0))
    return dict(x=x, y=y, theta=theta0, kappa0=kappa0)


# --------------------------------------------------------------- (b) shooting
def integrate(alpha, kappa0):
    def rhs(s, z):
        th, w, x, y = z
        return [w, -alpha * math.cos(th), math.cos(th), math.sin(th)]

    sol = solve_ivp(rhs, (0.0, 1.0), [0.0, kappa0, 0.0, 0.0], method='DOP853',
                    rtol=RTOL_ODE, atol=ATOL_ODE)
    assert sol.success, sol.message
    return sol.y[:, -1]


def shooting(alpha):
    # theta'(1) < 0 for kappa0 = 0; for kappa0 = sqrt(2 alpha) the first
    # integral gives theta' > 0 everywhere (theta only approaches pi/2).
    f = lambda k0: integrate(alpha, k0)[1]
    kappa0 = brentq(f, 0.0, math.sqrt(2.0 * alpha), xtol=1e-15,
                    rtol=4 * np.finfo(float).eps, maxiter=500)
    th, w, x, y = integrate(alpha, kappa0)
    return dict(x=x, y=y, theta=th, kappa0=kappa0, end_curvature=w)


def main():
    src_a = (f"closed form with incomplete elliptic integrals: mpmath {mp.__version__} "
             f"ellipf/ellipe/ellipk at 40 digits, tip angle from mpmath.findroot on "
             f"sqrt(alpha) = K(k) - F(phi1,k); cross-checked with SciPy {scipy.__version__} "
             f"scipy.special.ellipk/ellipkinc/ellipe/ellipeinc + brentq")
    src_b = (f"SciPy {scipy.__version__} solve_ivp (DOP853, rtol {RTOL_ODE:g}, atol "
             f"{ATOL_ODE:g}) on theta''=-alpha cos theta, x'=cos theta, y'=sin theta, "
             f"shooting on theta'(0) with scipy.optimize.brentq for theta'(1)=0")
    cases = []
    worst = 0.0
    print(f"{'alpha':>6} {'x_tip/L':>20} {'y_tip/L':>20} {'theta_tip':>20} {'kappa0*L':>20}")
    for alpha in ALPHAS:
        a = closed_form_mpmath(alpha)
        s = closed_form_scipy(alpha)
        b = shooting(alpha)
        diffs = {}
        for key in ('x', 'y', 'theta', 'kappa0'):
            ref = float(a[key])
            d_sc = abs(ref - s[key])
            d_ode = abs(ref - b[key])
            diffs[key] = dict(scipy_elliptic=d_sc, ode_shooting=d_ode)
            worst = max(worst, d_sc, d_ode)
            assert d_sc < TOL and d_ode < TOL, (alpha, key, ref, s[key], b[key])
        print(f"{alpha:6.2f} {mp.nstr(a['x'], 17):>20} {mp.nstr(a['y'], 17):>20} "
              f"{mp.nstr(a['theta'], 17):>20} {mp.nstr(a['kappa0'], 17):>20}")
        print(f"{'':6} max |closed form - scipy elliptic| = "
              f"{max(v['scipy_elliptic'] for v in diffs.values()):.2e}, "
              f"max |closed form - ODE shooting| = "
              f"{max(v['ode_shooting'] for v in diffs.values()):.2e}")

        def entry(key):
            return dict(value=float(a[key]), value_str=mp.nstr(a[key], 25),
                        ode_value=float(b[key]),
                        source=f"{src_a}; agrees with {src_b} to "
                               f"{diffs[key]['ode_shooting']:.1e}")

        cases.append(dict(alpha=alpha,
                          x_tip_over_L=entry('x'),
                          y_tip_over_L=entry('y'),
                          theta_tip=entry('theta'),
                          kappa0_times_L=entry('kappa0')))
    print(f"worst disagreement between methods: {worst:.2e} (required < {TOL:g})")
    out = dict(
        description=("Inextensible elastica cantilever clamped at origin along +x, tip "
                     "force of constant direction +y, magnitude P; alpha = P L^2/EI. "
                     "theta_tip in radians measured from +x (counter-clockwise); "
                     "kappa0_times_L = theta'(0) L = curvature at the clamp times L."),
        tolerance_between_methods=TOL,
        worst_disagreement=worst,
        versions=dict(scipy=scipy.__version__, mpmath=mp.__version__,
                      numpy=np.__version__),
        cases=cases)
    path = os.path.splitext(os.path.abspath(__file__))[0] + '.json'
    with open(path, 'w') as fh:
        json.dump(out, fh, indent=2)
    print(f"wrote {path}")


if __name__ == '__main__':
    main()
