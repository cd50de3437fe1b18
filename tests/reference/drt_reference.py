#!/usr/bin/env python3
"""Reference values for the DRT unit tests in eis-core/src/drt.rs and eis-core/src/nnls.rs.

Run from the repository root:  python3 tests/reference/drt_reference.py
It writes tests/reference/drt_fixture.json (the Rust tests read that file; CI needs no Python).

Recipe (the Rust tests build the same quantities themselves and compare):
  * frequencies f_i = 10**(3 - 0.25*i) Hz, i = 0..16 (1 kHz down to 0.1 Hz, 4 per decade), omega = 2*pi*f;
  * basis centres y_m = ln(tau_m) = -ln(omega_m) (ascending, i.e. in the order of the frequencies);
  * Gaussian basis phi_m(y) = exp(-(eps*(y - y_m))**2), FWHM = 2*sqrt(ln 2)/eps = 2 * mean centre spacing;
  * kernel matrices by adaptive quadrature (scipy.integrate.quad):
      K_re[i,m] = int phi_m(y) / (1 + (omega_i e^y)^2) dy,
      K_im[i,m] = -int phi_m(y) omega_i e^y / (1 + (omega_i e^y)^2) dy;
  * Gram matrices of first and second derivatives by quadrature, and a check that the closed forms
      order 1: eps*sqrt(pi/2)*(1 - t^2)*exp(-t^2/2)            (t = eps*d, d = y_i - y_j)
      order 2: eps^3*sqrt(pi/2)*(t^4 - 6 t^2 + 3)*exp(-t^2/2)
    agree with it;
  * data: R_inf = 5 ohm in series with a ZARC R/(1 + (j omega tau0)^phi), R = 100 ohm, tau0 = 1e-2 s,
    phi = 0.75, plus Gaussian noise of 0.3 % of |Z| on each part (numpy default_rng(20240601));
  * scale-free weighted design as eis-core builds it (modulus weighting, R_ref = max|Z|):
      unknowns (R_inf/R_ref, c_1/R_ref, ..., c_M/R_ref); rows: real parts, then imaginary parts;
      C = [[w*R_ref, w*R_ref*K_re], [0, w*R_ref*K_im]], b = [w*Z', w*Z''], w_i = 1/|Z_i|;
      penalty P = diag(0, Gram2) (closed form);
  * for each lambda, scipy.optimize.nnls on the augmented system [C; sqrt(lambda)*[0 | U]], [b; 0], where
    Gram2 = U^T U (U = transpose of numpy's lower Cholesky factor), which minimises
    ||C x - b||^2 + lambda x^T P x over x >= 0: the problem eis-core solves by its normal equations.
"""

import math

import numpy as np
import scipy
from scipy.integrate import quad
from scipy.optimize import nnls

from fixture_io import provenance, write_fixture


f = np.array([10 ** (3 - 0.25 * i) for i in range(17)])
omega = 2 * math.pi * f
y = -np.log(omega)
M = len(y)
spacing = (y[-1] - y[0]) / (M - 1)
eps = 2 * math.sqrt(math.log(2)) / (2.0 * spacing)

QUAD = dict(epsabs=1e-15, epsrel=1e-13, limit=400)


def kernel(w, ym):
    lo, hi = ym - 12 / eps, ym + 12 / eps
    phi = lambda t: math.exp(-((eps * (t - ym)) ** 2))
    re = quad(lambda t: phi(t) / (1 + (w * math.exp(t)) ** 2), lo, hi, points=[ym], **QUAD)[0]
    im = -quad(lambda t: phi(t) * w * math.exp(t) / (1 + (w * math.exp(t)) ** 2), lo, hi, points=[ym], **QUAD)[0]
    return re, im


K_re = np.zeros((M, M))
K_im = np.zeros((M, M))
for i in range(M):
    for m in range(M):
        K_re[i, m], K_im[i, m] = kernel(omega[i], y[m])


def dphi(t, a, k):
    u = t - a
    g = math.exp(-((eps * u) ** 2))
    if k == 1:
        return -2 * eps**2 * u * g
    return (4 * eps**4 * u**2 - 2 * eps**2) * g


def gram_quad(k, a, b):
    lo, hi = min(a, b) - 12 / eps, max(a, b) + 12 / eps
    return quad(lambda t: dphi(t, a, k) * dphi(t, b, k), lo, hi, points=sorted({a, b}), **QUAD)[0]


def gram_closed(k, d):
    t2 = (eps * d) ** 2
    e = math.exp(-t2 / 2)
    c = math.sqrt(math.pi / 2)
    return c * eps * (1 - t2) * e if k == 1 else c * eps**3 * (t2 * t2 - 6 * t2 + 3) * e


gram = {}
for k in (1, 2):
    q = np.array([[gram_quad(k, y[i], y[j]) for j in range(M)] for i in range(M)])
    closed = np.array([[gram_closed(k, y[i] - y[j]) for j in range(M)] for i in range(M)])
    err = np.max(np.abs(q - closed)) / np.max(np.abs(q))
    assert err < 1e-10, f"closed-form Gram of order {k} disagrees with quadrature: {err}"
    print(f"Gram order {k}: closed form vs quadrature, max relative deviation {err:.2e}")
    gram[k] = (q, closed)

R_inf, R, tau0, phi_z = 5.0, 100.0, 1e-2, 0.75
Z = R_inf + R / (1 + (1j * omega * tau0) ** phi_z)
rng = np.random.default_rng(20240601)
Z = Z + 0.003 * np.abs(Z) * (rng.standard_normal(M) + 1j * rng.standard_normal(M))

w = 1 / np.abs(Z)
r_ref = np.max(np.abs(Z))
C = np.zeros((2 * M, M + 1))
C[:M, 0] = w * r_ref
C[:M, 1:] = (w * r_ref)[:, None] * K_re
C[M:, 1:] = (w * r_ref)[:, None] * K_im
b = np.concatenate([w * Z.real, w * Z.imag])
P = np.zeros((M + 1, M + 1))
P[1:, 1:] = gram[2][1]
U = np.linalg.cholesky(gram[2][1]).T

cases = []
for lam in (1e-6, 1e-4, 1e-2, 1.0):
    C_aug = np.vstack([C, math.sqrt(lam) * np.hstack([np.zeros((M, 1)), U])])
    d = np.concatenate([b, np.zeros(M)])
    x, rnorm = nnls(C_aug, d, maxiter=50 * (M + 1))
    objective = float(np.sum((C @ x - b) ** 2) + lam * x @ P @ x)
    cases.append(dict(**{"lambda": lam}, x=x.tolist(), objective=objective, free=int(np.sum(x > 0))))
    print(f"lambda {lam:g}: {int(np.sum(x > 0))} free variables, objective {objective:.12e}")

fixture = provenance("tests/reference/drt_reference.py", numpy=np.__version__, scipy=scipy.__version__)
fixture |= {
    "frequency_hz": f.tolist(),
    "epsilon": eps,
    "centres_ln_tau": y.tolist(),
    "kernel_re": K_re.tolist(),
    "kernel_im": K_im.tolist(),
    "gram1_quad": gram[1][0].tolist(),
    "gram2_quad": gram[2][0].tolist(),
    "z_re": Z.real.tolist(),
    "z_im": Z.imag.tolist(),
    "design": C.tolist(),
    "data": b.tolist(),
    "penalty": P.tolist(),
    "cases": cases,
}
print("wrote", write_fixture("drt_fixture.json", fixture))
