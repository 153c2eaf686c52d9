#!/usr/bin/env python3
"""Independent derivation of a one-segment, degree-1, order-2 case of the model,
straight from the definitions in /work/shared/MODEL.md (no moment functions, no
Legendre reduction, nothing from the project's code).

Case
    one segment, L = 3/10 m, kappa(sigma) = q0 + q1 sigma, base angle 0,
    rho = 1/2 kg/m (uniform), EI = 1/50 N m^2 (uniform), no rotary inertia,
    tip point mass M = 1/20 kg, gravity g = (0, -981/100) m/s^2.
Truncated kinematics of order N = 2
    phi(sigma) = a sigma + delta(sigma),  a = L q0,  delta = L q1 sigma^2 / 2,
    e^{i phi} ~= e^{i a sigma} (1 + i delta - delta^2 / 2),
    p(sigma)   = L int_0^sigma e^{i a tau} (1 + i delta(tau) - delta(tau)^2/2) dtau
               (complex, x + i y).
Quantities
    T   = 1/2 int_0^1 rho |p_dot|^2 L dsigma + 1/2 M |p_dot(1)|^2 = 1/2 qd^T B qd
          => B_kl = int_0^1 rho Re(p_k conj(p_l)) L dsigma + M Re(p_k(1) conj(p_l(1)))
             with p_k = dp/dq_k (derivative taken under the integral sign)
    dB_kl/dq_m likewise from p_km = d^2 p / dq_k dq_m
    C_ik = sum_l 1/2 (dB_ik/dq_l + dB_il/dq_k - dB_kl/dq_i) qd_l
    U_g  = -int rho g.p L dsigma - M g.p(1),   G_k = dU_g/dq_k
    K    = EI L / (i + k + 1)   (computed too, trivially)
    tip  = p(1)

Two independent evaluations per state, required to agree to 1e-25 (absolute,
values are O(1e-3..1)):
  (A) exact: the state is substituted as exact Rationals into the SymPy
      derivatives of the integrand, SymPy integrate() does the tau integral
      (0..sigma) and then the sigma integral (0..1) in closed form, and the
      result is evaluated with evalf at 40 digits;
  (B) quadrature: the same symbolic integrands lambdified to mpmath and
      integrated by nested mpmath.quad (Gauss-Legendre) at mp.dps = 30.
The reported values are those of (A).

Writes sympy_segment.json next to this file.
"""
import json
import os
import time

import mpmath as mp
import sympy as sp

# ----------------------------------------------------------------- the case
L = sp.Rational(3, 10)
RHO = sp.Rational(1, 2)
EI = sp.Rational(1, 50)
MTIP = sp.Rational(1, 20)
GX, GY = sp.Integer(0), sp.Rational(-981, 100)
NQ = 2

STATES = [  # decimal strings, converted exactly to Rationals
    (["0.7", "-1.3"], ["0.4", "0.9"]),
    (["0", "0"], ["1", "-1"]),
    (["2.5", "1.1"], ["-0.3", "0.6"]),
    (["1e-9", "0.5"], ["0.2", "0.2"]),
]
EVALF_DIGITS = 40
QUAD_DPS = 30
AGREE = mp.mpf("1e-25")

q = sp.symbols("q0 q1", real=True)
tau, sig = sp.symbols("tau sigma", real=True)

a = L * q[0]
delta = L * q[1] * tau**2 / 2
W = L * sp.exp(sp.I * a * tau) * (1 + sp.I * delta - delta**2 / 2)   # dp/dtau

# symbolic derivatives of the integrand w.r.t. q
W_k = [sp.diff(W, q[k]) for k in range(NQ)]
W_km = [[sp.diff(W, q[k], q[m]) for m in range(NQ)] for k in range(NQ)]


def rational(s):
    return sp.Rational(s)


# ------------------------------------------------------- (A) exact SymPy route
def exact_route(qv):
    subs = {q[0]: qv[0], q[1]: qv[1]}

    def prim(expr):  # sigma -> int_0^sigma expr(tau) dtau, exact
        e = sp.expand(expr.subs(subs))
        return sp.expand(sp.integrate(e, (tau, 0, sig)))

    p = prim(W)
    p_k = [prim(W_k[k]) for k in range(NQ)]
    p_km = [[prim(W_km[k][m]) for m in range(NQ)] for k in range(NQ)]

    def at1(e):
        return e.subs(sig, 1)

    def mass_inner(u, v):  # int_0^1 rho Re(u conj v) L dsigma + M Re(u(1) conj v(1))
        prod = sp.expand(u * sp.conjugate(v))
        integ = sp.integrate(prod, (sig, 0, 1))
        tipterm = at1(u) * sp.conjugate(at1(v))
        return sp.re(sp.expand_complex(RHO * L * integ + MTIP * tipterm))

    B = [[None] * NQ for _ in range(NQ)]
    for k in range(NQ):
        for l in range(k, NQ):
            B[k][l] = B[l][k] = mass_inner(p_k[k], p_k[l])
    # dB[k][l][m] = dB_kl / dq_m
    dB = [[[None] * NQ for _ in range(NQ)] for _ in range(NQ)]
    for k in range(NQ):
        for l in range(k, NQ):
            for m in range(NQ):
                v = mass_inner(p_km[k][m], p_k[l]) + mass_inner(p_k[k], p_km[l][m])
                dB[k][l][m] = dB[l][k][m] = v
    G = []
    for k in range(NQ):
        e = sp.expand_complex(p_k[k])
        gp = GX * sp.re(e) + GY * sp.im(e)
        val = -RHO * L * sp.integrate(sp.expand(gp), (sig, 0, 1)) - MTIP * gp.subs(sig, 1)
        G.append(val)
    tip = sp.expand_complex(at1(p))
    tip = [sp.re(tip), sp.im(tip)]

    ev = lambda e: mp.mpf(str(sp.N(e, EVALF_DIGITS, maxn=400)))
    with mp.workdps(EVALF_DIGITS):
        return dict(
            B=[[ev(B[i][j]) for j in range(NQ)] for i in range(NQ)],
            dB=[[[ev(dB[i][j][m]) for m in range(NQ)] for j in range(NQ)]
                for i in range(NQ)],
            G=[ev(x) for x in G],
            tip=[ev(x) for x in tip],
        )


# ------------------------------------------------- (B) nested mpmath quadrature
def quad_route(qv):
    args = (tau, q[0], q[1])
    lam = lambda e: sp.lambdify(args, e, modules="mpmath")
    f_p = lam(W)
    f_k = [lam(W_k[k]) for k in range(NQ)]
    f_km = [[lam(W_km[k][m]) for m in range(NQ)] for k in range(NQ)]
    with mp.workdps(QUAD_DPS):
        q0, q1 = mp.mpf(str(sp.N(qv[0], 50))), mp.mpf(str(sp.N(qv[1], 50)))
        cache = {}

        def inner(s):
            if s in cache:
                return cache[s]
            I = lambda f: mp.quad(lambda t: f(t, q0, q1), [0, s], method="gauss-legendre")
            r = dict(p=I(f_p),
                     k=[I(f_k[k]) for k in range(NQ)],
                     km=[[I(f_km[k][m]) for m in range(NQ)] for k in range(NQ)])
            cache[s] = r
            return r

        outer = lambda h: mp.quad(h, [0, 1], method="gauss-legendre")
        one = inner(mp.mpf(1))

        def mass_inner(get_u, get_v):
            integ = outer(lambda s: mp.re(get_u(inner(s)) * mp.conj(get_v(inner(s)))))
            return mp.mpf(RHO * L) * integ + mp.mpf(MTIP) * mp.re(get_u(one) * mp.conj(get_v(one)))

        B = [[None] * NQ for _ in range(NQ)]
        dB = [[[None] * NQ for _ in range(NQ)] for _ in range(NQ)]
        for k in range(NQ):
            for l in range(k, NQ):
                B[k][l] = B[l][k] = mass_inner(lambda r, k=k: r["k"][k],
                                               lambda r, l=l: r["k"][l])
                for m in range(NQ):
                    v = (mass_inner(lambda r, k=k, m=m: r["km"][k][m], lambda r, l=l: r["k"][l])
                         + mass_inner(lambda r, k=k: r["k"][k], lambda r, l=l, m=m: r["km"][l][m]))
                    dB[k][l][m] = dB[l][k][m] = v
        gx, gy = mp.mpf(GX), mp.mpf(GY)
        gdot = lambda z: gx * mp.re(z) + gy * mp.im(z)
        G = [-mp.mpf(RHO * L) * outer(lambda s, k=k: gdot(inner(s)["k"][k]))
             - mp.mpf(MTIP) * gdot(one["k"][k]) for k in range(NQ)]
        tip = [mp.re(one["p"]), mp.im(one["p"])]
        return dict(B=B, dB=dB, G=G, tip=tip)


def coriolis(dB, qd):
    return [[sum((dB[i][k][l] + dB[i][l][k] - dB[k][l][i]) * qd[l] for l in range(NQ)) / 2
             for k in range(NQ)] for i in range(NQ)]


def flat(x):
    if isinstance(x, list):
        out = []
        for y in x:
            out.extend(flat(y))
        return out
    return [x]


def main():
    src_A = (f"SymPy {sp.__version__}: symbolic d/dq of the order-2 truncated integrand, "
             f"state substituted as exact Rationals, exact integrate() over tau then sigma, "
             f"evalf to {EVALF_DIGITS} digits (mpmath {mp.__version__})")
    src_B = (f"nested mpmath {mp.__version__} quad (Gauss-Legendre, dps {QUAD_DPS}) of the "
             f"SymPy-lambdified integrands")
    K = [[EI * L / (i + k + 1) for k in range(NQ)] for i in range(NQ)]
    states_out = []
    worst = mp.mpf(0)
    for qs, qds in STATES:
        t0 = time.time()
        qv = [rational(s) for s in qs]
        A = exact_route(qv)
        tA = time.time() - t0
        Bq = quad_route(qv)
        tB = time.time() - t0 - tA
        with mp.workdps(EVALF_DIGITS):
            qd = [mp.mpf(s) for s in qds]
            CA = coriolis(A["dB"], qd)
            CB = coriolis(Bq["dB"], qd)
            diff = max(abs(x - y) for key in ("B", "dB", "G", "tip")
                       for x, y in zip(flat(A[key]), flat(Bq[key])))
            diff = max(diff, max(abs(x - y) for x, y in zip(flat(CA), flat(CB))))
            worst = max(worst, diff)
            assert diff < AGREE, (qs, diff)
            # sanity: B symmetric positive definite, Bdot - 2C skew-symmetric
            Bdot = [[sum(A["dB"][i][k][m] * qd[m] for m in range(NQ)) for k in range(NQ)]
                    for i in range(NQ)]
            N = [[Bdot[i][k] - 2 * CA[i][k] for k in range(NQ)] for i in range(NQ)]
            skew = max(abs(N[i][k] + N[k][i]) for i in range(NQ) for k in range(NQ))
            detB = A["B"][0][0] * A["B"][1][1] - A["B"][0][1] ** 2
            assert A["B"][0][0] > 0 and detB > 0 and skew < mp.mpf("1e-35")
            Cqd = [sum(CA[i][k] * qd[k] for k in range(NQ)) for i in range(NQ)]
            s = lambda x: mp.nstr(x, 25, min_fixed=-5, max_fixed=5)
            print(f"q = {qs}, qdot = {qds}   (exact {tA:.1f}s, quadrature {tB:.1f}s, "
                  f"max |exact - quadrature| = {mp.nstr(diff, 3)})")
            print(f"  B   = [[{s(A['B'][0][0])}, {s(A['B'][0][1])}],\n"
                  f"         [{s(A['B'][1][0])}, {s(A['B'][1][1])}]]")
            print(f"  C   = [[{s(CA[0][0])}, {s(CA[0][1])}],\n"
                  f"         [{s(CA[1][0])}, {s(CA[1][1])}]]")
            print(f"  G   = [{s(A['G'][0])}, {s(A['G'][1])}]")
            print(f"  tip = [{s(A['tip'][0])}, {s(A['tip'][1])}]")
            print(f"  C qdot = [{s(Cqd[0])}, {s(Cqd[1])}]")
            src = f"{src_A}; agrees with {src_B} to {mp.nstr(diff, 2)}"
            S = lambda x: mp.nstr(x, 25)
            M2 = lambda X: [[S(X[i][k]) for k in range(NQ)] for i in range(NQ)]
            states_out.append(dict(
                q=qs, qdot=qds,
                B=dict(value=M2(A["B"]), source=src),
                dB_dq=dict(value=[[[S(A["dB"][i][k][m]) for m in range(NQ)]
                                   for k in range(NQ)] for i in range(NQ)],
                           layout="dB_dq[i][k][m] = dB_ik/dq_m", source=src),
                C=dict(value=M2(CA), source=src),
                C_qdot=dict(value=[S(x) for x in Cqd], source=src),
                G=dict(value=[S(x) for x in A["G"]], source=src),
                tip=dict(value=[S(x) for x in A["tip"]], layout="[x, y] of p(1)",
                         source=src),
            ))
    print(f"worst |exact - quadrature| over all values: {mp.nstr(worst, 3)}")
    out = dict(
        description=("One segment, L=3/10, curvature q0 + q1 sigma, order N=2 truncated "
                     "kinematics e^{i phi} ~ e^{i a s}(1 + i d - d^2/2), a = L q0, "
                     "d = L q1 s^2/2, base angle 0; rho=1/2, EI=1/50, no rotary inertia, "
                     "tip mass M=1/20, g=(0,-981/100). Values are decimal strings with 25 "
                     "significant digits; states are the decimal strings taken exactly."),
        params=dict(L="3/10", rho="1/2", EI="1/50", M_tip="1/20", J_tip="0", iota="0",
                    g=["0", "-981/100"], N=2, degree=1),
        K=dict(value=[[str(K[i][k]) for k in range(NQ)] for i in range(NQ)],
               source=f"SymPy {sp.__version__} exact EI L/(i+k+1)"),
        agreement_required=mp.nstr(AGREE, 2),
        worst_disagreement=mp.nstr(worst, 3),
        versions=dict(sympy=sp.__version__, mpmath=mp.__version__),
        states=states_out)
    path = os.path.splitext(os.path.abspath(__file__))[0] + ".json"
    with open(path, "w") as fh:
        json.dump(out, fh, indent=2)
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
