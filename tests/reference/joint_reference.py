#!/usr/bin/env python3
"""Reference optimum and standard errors of a joint fit of a chain of spectra, computed independently of
the Rust code with SciPy's general-purpose `scipy.optimize.least_squares` (Virtanen et al. 2020, Nature
Methods 17, 261; trust-region reflective method, Branch, Coleman & Li 1999, SIAM J. Sci. Comput. 21, 1)
and an analytic Jacobian written out here in NumPy from the element formulas.

The chain: four spectra of the two-arc circuit `R0 + Rf|Qf + Rct|Qdl` (impedance
R0 + Rf/(1 + Rf Qf (jw)^nf) + Rct/(1 + Rct Qdl (jw)^ndl)), 100 kHz down to 10 mHz at 8 points per
decade (57 points), the resistances drifting from spectrum to spectrum, the two CPE exponents common
to the chain. Gaussian noise of 0.5 % of |Z| is added to the real and imaginary parts independently
(numpy.random.default_rng(2026)). Invented values of battery magnitude.

The joint problem: unknowns R0, Rf, Qf, Rct, Qdl of each spectrum and the shared exponents Qf.n and
Qdl.n; residuals (Z_model - Z_data)/|Z_data| (modulus weighting), real and imaginary parts of every
spectrum stacked. Fitted in the parameters themselves with bounds (positive quantities > 0, exponents in
(0, 1]) from the perturbed start written to the fixture, xtol = ftol = gtol = 1e-15. The analytic
Jacobian is checked against central differences before use.

Standard errors: covariance s^2 (J^T J)^-1 with J the analytic Jacobian of the stacked weighted
residuals with respect to the parameters at the optimum and s^2 = chi^2/(sum 2N - P), P the number of
unknowns of the chain (4 x 5 + 2 = 22).

Writes joint_fixture.json beside this script. Regenerate with:

    pip install numpy scipy
    python3 tests/reference/joint_reference.py
"""

import numpy as np
import scipy
from scipy.optimize import least_squares

from fixture_io import LEAST_SQUARES, provenance, write_fixture

SEED = 2026
NOISE = 0.005
M = 4  # spectra in the chain
LOCAL = ["R0", "Rf", "Qf", "Rct", "Qdl"]  # per spectrum
SHARED = ["Qf.n", "Qdl.n"]
# Parameter order of the circuit in eis-core: R0, Rf, Qf, Qf.n, Rct, Qdl, Qdl.n.
CIRCUIT = "R0 + Rf|Qf + Rct|Qdl"


def frequencies():
    return 10.0 ** (5 - np.arange(57) / 8)


def arc(r, q, n, w):
    """Z, dZ/dR, dZ/dQ, dZ/dn of R/(1 + R Q (jw)^n)."""
    s_n = (1j * w) ** n
    d = 1 + r * q * s_n
    z = r / d
    dr = 1 / d**2
    dq = -(r**2) * s_n / d**2
    dn = -(r**2) * q * s_n * (np.log(w) + 1j * np.pi / 2) / d**2
    return z, dr, dq, dn


def model(p, w):
    """Z and dZ/dp (columns in circuit order) for the full parameter vector p of one spectrum."""
    r0, rf, qf, nf, rct, qdl, ndl = p
    za, dra, dqa, dna = arc(rf, qf, nf, w)
    zb, drb, dqb, dnb = arc(rct, qdl, ndl, w)
    z = r0 + za + zb
    jac = np.stack([np.ones_like(za), dra, dqa, dna, drb, dqb, dnb], axis=1)
    return z, jac


def truths():
    out = []
    for k in range(M):
        out.append([0.020 + 0.001 * k, 0.010 + 0.0015 * k, 2e-3, 0.88, 0.030 + 0.004 * k, 0.5, 0.84])
    return np.array(out)


def unpack(x):
    """Full parameter vectors of every spectrum from the joint unknowns."""
    shared = x[M * 5 :]
    ps = []
    for k in range(M):
        r0, rf, qf, rct, qdl = x[5 * k : 5 * k + 5]
        ps.append(np.array([r0, rf, qf, shared[0], rct, qdl, shared[1]]))
    return ps


def pack(ps):
    x = []
    for p in ps:
        x += [p[0], p[1], p[2], p[4], p[5]]
    x += [np.median([p[3] for p in ps]), np.median([p[6] for p in ps])]
    return np.array(x)


def main():
    f = frequencies()
    w = 2 * np.pi * f
    rng = np.random.default_rng(SEED)
    t = truths()
    data = []
    for p in t:
        z0, _ = model(p, w)
        z = z0 + NOISE * np.abs(z0) * (rng.standard_normal(len(w)) + 1j * rng.standard_normal(len(w)))
        data.append(z)
    starts = [p * np.exp(0.15 * rng.standard_normal(7)) for p in t]
    for s, p in zip(starts, t):
        s[3] = p[3] - 0.04
        s[6] = p[6] + 0.03

    def residuals(x):
        out = []
        for p, z in zip(unpack(x), data):
            zm, _ = model(p, w)
            r = (zm - z) / np.abs(z)
            out += [r.real, r.imag]
        return np.concatenate(out)

    nres = 2 * len(w) * M
    npar = 5 * M + 2

    def jacobian(x):
        j = np.zeros((nres, npar))
        for k, (p, z) in enumerate(zip(unpack(x), data)):
            _, d = model(p, w)
            d = d / np.abs(z)[:, None]
            rows_re = slice(2 * len(w) * k, 2 * len(w) * k + len(w))
            rows_im = slice(2 * len(w) * k + len(w), 2 * len(w) * (k + 1))
            for c_local, c in enumerate([0, 1, 2, 4, 5]):
                j[rows_re, 5 * k + c_local] = d[:, c].real
                j[rows_im, 5 * k + c_local] = d[:, c].imag
            for c_shared, c in enumerate([3, 6]):
                j[rows_re, 5 * M + c_shared] = d[:, c].real
                j[rows_im, 5 * M + c_shared] = d[:, c].imag
        return j

    x0 = pack(starts)
    # The analytic Jacobian against central differences (relative step 1e-6).
    fd = np.zeros((nres, npar))
    for c in range(npar):
        h = 1e-6 * abs(x0[c])
        e = np.zeros(npar)
        e[c] = h
        fd[:, c] = (residuals(x0 + e) - residuals(x0 - e)) / (2 * h)
    an = jacobian(x0)
    err = np.max(np.abs(fd - an)) / np.max(np.abs(an))
    assert err < 1e-6, f"analytic Jacobian disagrees with finite differences: {err:e}"

    lower = np.zeros(npar)
    upper = np.full(npar, np.inf)
    upper[5 * M :] = 1.0
    sol = least_squares(
        residuals,
        x0,
        jac=jacobian,
        bounds=(lower, upper),
        **LEAST_SQUARES,
    )
    chi2 = float(np.sum(sol.fun**2))
    j = jacobian(sol.x)
    s2 = chi2 / (nres - npar)
    cov = np.linalg.inv(j.T @ j) * s2
    se = np.sqrt(np.diag(cov))
    fitted = unpack(sol.x)
    se_full = unpack(se)

    doc = provenance("tests/reference/joint_reference.py", numpy=np.__version__, scipy=scipy.__version__)
    doc |= {
        "method": "scipy.optimize.least_squares trf, analytic Jacobian, covariance (J^T J)^-1 s^2",
        "circuit": CIRCUIT,
        "shared": SHARED,
        "seed": SEED,
        "noise_relative": NOISE,
        "status": int(sol.status),
        "chi_square": chi2,
        "dof": nres - npar,
        "frequency_hz": f.tolist(),
        "spectra": [
            {
                "z_real_ohm": z.real.tolist(),
                "z_imag_ohm": z.imag.tolist(),
                "truth": tp.tolist(),
                "start": s.tolist(),
                "params": p.tolist(),
                "stderr": e.tolist(),
            }
            for z, tp, s, p, e in zip(data, t, starts, fitted, se_full)
        ],
    }
    write_fixture("joint_fixture.json", doc)
    print(f"chi2 {chi2:.6e}, status {sol.status}, shared n = {sol.x[5 * M:]}, se {se[5 * M:]}")


if __name__ == "__main__":
    main()
