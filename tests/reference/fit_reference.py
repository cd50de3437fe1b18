#!/usr/bin/env python3
"""Reference optima of weighted complex nonlinear least-squares fits, computed independently of the Rust
code with SciPy's general-purpose `scipy.optimize.least_squares` (Virtanen et al. 2020, Nature Methods
17, 261) on circuit impedances written out here in NumPy straight from the element formulas.

For each case: a spectrum from 100 kHz to 10 mHz, 10 points per decade (71 points), is simulated from
the true parameters and given Gaussian noise relative to |Z| on the real and imaginary parts
independently (numpy.random.default_rng with the seed listed beside the case). It is fitted with
modulus weighting, residuals (Z_model - Z_data)/|Z_data| with real parts stacked over imaginary parts,
on log-transformed positive parameters and CPE exponents bounded to (0, 1], started near the truth
(the truth times exp(0.2 N(0, 1)) with the same seed, exponents lowered by 0.03) and again from the
truth, with tolerances xtol = ftol = gtol = 1e-15; the lower chi-square is kept.

Standard errors: covariance s^2 (J^T J)^-1 with J the Jacobian of the weighted residuals with respect
to the parameters themselves (central differences, relative step 1e-6) at the optimum and
s^2 = chi^2/(2N - P).

Writes fit_fixture.json beside this script. Regenerate with:

    pip install numpy scipy
    python3 tests/reference/fit_reference.py

Parameter order of each case: the order in which `eis-core` numbers the parameters of the circuit text
(elements left to right, each kind's parameters in table order: R; C; L; Q: Q, n; W: sigma;
Wt/Wr/G: R, tau).
"""

import numpy as np
import scipy
from scipy.optimize import least_squares

from fixture_io import LEAST_SQUARES, provenance, write_fixture


# Element impedances; w is the angular frequency 2 pi f (rad/s), j^2 = -1, capacitive Im < 0.
def R(r, w):
    return np.full_like(w, r, dtype=complex)


def C(c, w):
    return 1 / (1j * w * c)


def L(l, w):
    return 1j * w * l


def Q(q, n, w):
    return 1 / (q * (1j * w) ** n)


def W(sigma, w):
    return sigma * (1 - 1j) / np.sqrt(w)


def Wt(r, tau, w):
    s = np.sqrt(1j * w * tau)
    return r * np.tanh(s) / s


def Wr(r, tau, w):
    s = np.sqrt(1j * w * tau)
    return r / (s * np.tanh(s))


def G(r, tau, w):
    return r / np.sqrt(1 + 1j * w * tau)


def par(*zs):
    return 1 / sum(1 / z for z in zs)


# (model text, true parameters, indices of CPE exponents, relative noise, seed, impedance)
CASES = [
    (
        "R0 + Rct|Qdl",
        [1, 10, 1e-4, 0.9],
        [3],
        0.005,
        101,
        lambda p, w: R(p[0], w) + par(R(p[1], w), Q(p[2], p[3], w)),
    ),
    (
        "R0 + Rfilm|Qfilm + Rct|Qdl",
        [1, 3, 1e-5, 0.9, 10, 1e-3, 0.9],
        [3, 6],
        0.002,
        102,
        lambda p, w: R(p[0], w) + par(R(p[1], w), Q(p[2], p[3], w)) + par(R(p[4], w), Q(p[5], p[6], w)),
    ),
    (
        "R0 + (Rct + W1)|Qdl",
        [1, 10, 5, 1e-4, 0.9],
        [4],
        0.01,
        103,
        lambda p, w: R(p[0], w) + par(R(p[1], w) + W(p[2], w), Q(p[3], p[4], w)),
    ),
    (
        "R0 + (Rct + Wtd)|Qdl",
        [1, 10, 20, 5, 1e-4, 0.9],
        [5],
        0.005,
        104,
        lambda p, w: R(p[0], w) + par(R(p[1], w) + Wt(p[2], p[3], w), Q(p[4], p[5], w)),
    ),
    (
        "R0 + (Rct + Wrd)|Qdl",
        [1, 10, 20, 50, 1e-4, 0.9],
        [5],
        0.001,
        105,
        lambda p, w: R(p[0], w) + par(R(p[1], w) + Wr(p[2], p[3], w), Q(p[4], p[5], w)),
    ),
    (
        "L0 + R0 + Rfilm|Qfilm + (Rct + Wtd)|Qdl",
        [0.5e-6, 0.05, 0.02, 5e-3, 0.9, 0.1, 0.2, 20, 0.5, 0.9],
        [4, 9],
        0.005,
        106,
        lambda p, w: L(p[0], w)
        + R(p[1], w)
        + par(R(p[2], w), Q(p[3], p[4], w))
        + par(R(p[5], w) + Wt(p[6], p[7], w), Q(p[8], p[9], w)),
    ),
    (
        "R0 + Rsei|Csei + Rct|Cdl + G1",
        [0.02, 0.01, 2e-4, 0.05, 0.5, 0.03, 2.0],
        [],
        0.003,
        107,
        lambda p, w: R(p[0], w) + par(R(p[1], w), C(p[2], w)) + par(R(p[3], w), C(p[4], w)) + G(p[5], p[6], w),
    ),
]



def frequencies():
    # 100 kHz down to 10 mHz, 10 points per decade: 10^(5 - k/10), k = 0..70.
    return 10.0 ** (5 - np.arange(71) / 10)


def weighted_residuals(z_model, z_data):
    r = (z_model - z_data) / np.abs(z_data)
    return np.concatenate([r.real, r.imag])


def fit_case(model, truth, exps, noise, seed, zfun):
    f = frequencies()
    w = 2 * np.pi * f
    truth = np.array(truth, dtype=float)
    rng = np.random.default_rng(seed)
    z0 = zfun(truth, w)
    z = z0 + noise * np.abs(z0) * (rng.standard_normal(len(w)) + 1j * rng.standard_normal(len(w)))
    pos = [k for k in range(len(truth)) if k not in exps]

    def to_params(x):
        p = np.empty_like(x)
        p[pos] = np.exp(x[pos])
        p[exps] = x[exps]
        return p

    def to_internal(p):
        x = np.array(p, dtype=float)
        x[pos] = np.log(x[pos])
        return x

    lower = np.full(len(truth), -np.inf)
    upper = np.full(len(truth), np.inf)
    lower[exps] = 0.0
    upper[exps] = 1.0

    def res(x):
        return weighted_residuals(zfun(to_params(x), w), z)

    near = truth * np.exp(0.2 * rng.standard_normal(len(truth)))
    near[exps] = truth[exps] - 0.03
    best = None
    for start in (near, truth):
        sol = least_squares(
            res,
            to_internal(start),
            bounds=(lower, upper),
            jac="3-point",
            **LEAST_SQUARES,
        )
        chi2 = float(np.sum(sol.fun**2))
        if best is None or chi2 < best[0]:
            best = (chi2, sol)
    chi2, sol = best
    p = to_params(sol.x)

    # Jacobian with respect to the parameters themselves, central differences.
    def res_p(q):
        return weighted_residuals(zfun(q, w), z)

    jac = np.empty((2 * len(w), len(p)))
    for k in range(len(p)):
        h = 1e-6 * abs(p[k])
        up, dn = p.copy(), p.copy()
        up[k] += h
        dn[k] -= h
        jac[:, k] = (res_p(up) - res_p(dn)) / (2 * h)
    dof = 2 * len(w) - len(p)
    s2 = chi2 / dof
    # Column scaling before the inverse keeps JᵀJ well conditioned across parameters of very
    # different magnitude (inductance 1e-7 H next to CPE coefficients of order 1).
    scale = np.linalg.norm(jac, axis=0)
    a = jac / scale
    cov = s2 * np.linalg.inv(a.T @ a) / np.outer(scale, scale)
    se = np.sqrt(np.diag(cov))
    return {
        "model": model,
        "truth": truth.tolist(),
        "noise_relative": noise,
        "seed": seed,
        "frequency_hz": f.tolist(),
        "z_real_ohm": z.real.tolist(),
        "z_imag_ohm": z.imag.tolist(),
        "params": p.tolist(),
        "chi_square": chi2,
        "stderr": se.tolist(),
        "scipy_status": int(sol.status),
        "scipy_nfev": int(sol.nfev),
    }


def main():
    out = provenance("tests/reference/fit_reference.py", numpy=np.__version__, scipy=scipy.__version__)
    out |= {
        "method": "scipy.optimize.least_squares (trf), modulus weighting, log-transformed positive "
        "parameters, CPE exponents bounded to (0, 1], xtol = ftol = gtol = 1e-15; standard errors from "
        "s^2 (J^T J)^-1 in parameter space, s^2 = chi^2/(2N - P)",
        "cases": [fit_case(*c) for c in CASES],
    }
    path = write_fixture("fit_fixture.json", out)
    for c in out["cases"]:
        print(f"{c['model']:45s} chi2 {c['chi_square']:.6e} status {c['scipy_status']} nfev {c['scipy_nfev']}")
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
