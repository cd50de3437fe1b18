#!/usr/bin/env python3
"""A held-out benchmark of battery-like impedance spectra for the automatic fit search, with each
family's model and its Jacobian written in closed form (NumPy), independent of the Rust code.

Five families (model text in eis's circuit language; parameters in the order eis numbers them):

  one arc             R0 + Rct|Qdl
  two arcs            R0 + Rf|Qf + Rct|Qdl
  arc + Warburg       R0 + (Rct + W1)|Qdl                      semi-infinite diffusion
  two arcs + Wt       R0 + Rf|Qf + (Rct + Wtd)|Qdl             transmissive finite diffusion
  L + two arcs + Wr   L0 + R0 + Rf|Qf + (Rct + Wrd)|Qdl        series inductance, reflective diffusion

Element impedances (omega = 2 pi f, j^2 = -1, capacitive Im < 0), common practice (e.g. Lasia 2014,
Electrochemical Impedance Spectroscopy and its Applications, Springer, ch. 4 and 9; Orazem & Tribollet
2017, Electrochemical Impedance Spectroscopy, 2nd ed., Wiley, ch. 9 and 14):
  R: r    L: j omega l    CPE: 1/(q (j omega)^n)    W: sigma (1 - j)/sqrt(omega)
  Wt: r tanh(s)/s,  Wr: r coth(s)/s,  s = sqrt(j omega tau)

Draws (numpy.random.default_rng(seed), every spectrum independent), over battery magnitudes (plausibility
ranges from memory: Li-ion cells of 0.1 to 100 Ah):
  frequencies 100 kHz to 10 mHz, 10 per decade (71 points)
  R0 log-uniform 1 mOhm..1 Ohm; Rf = R0 x 0.1..3; Rct = R0 x 0.3..10
  film apex 300 Hz..10 kHz; charge-transfer apex 1 to 3 decades lower (log-uniform, and at least 0.3 Hz);
  the single arc's apex 1 Hz..3 kHz
  CPE exponents uniform 0.75..0.95 (film) and 0.75..0.95 (double layer)
  Warburg sigma = Rct x 0.02..0.5 x sqrt(omega_ct) (the tail crosses Rct within the window)
  finite diffusion R = Rct x 0.3..3, tau = 10..300 x the charge-transfer time constant, at most 30 s
  series inductance giving 0.1..3 x R0 at 100 kHz
  noise: Gaussian, 0.1..1 % of |Z| (log-uniform per spectrum) on the real and imaginary parts

The data-driven start is a common-practice reading of the spectrum: the high-frequency intercept for R0,
Im Z / omega at the highest frequency for L0, apices of -Im Z for the arc time constants, real parts at
the minima of -Im Z between apices for the resistances, the low-frequency end for diffusion.

Used by bench/compare_scipy.py. Run alone it checks every family's closed-form Jacobian against central
differences and, with --fixture, writes the committed regression subset (see `fixture` below).
"""
import argparse
import json
import os
import sys

import numpy as np

FREQS = 10.0 ** (5 - np.arange(71) / 10)
OMEGAS = 2 * np.pi * FREQS


# --- elements: impedance and derivatives with respect to their own parameters -----------------------
# Each returns (Z, [dZ/dp for each parameter]) over the angular frequencies w.


def el_r(p, w):
    return np.full(len(w), p[0], dtype=complex), [np.ones(len(w), dtype=complex)]


def el_l(p, w):
    return 1j * w * p[0], [1j * w + 0j]


def el_q(p, w):
    q, n = p
    z = 1.0 / (q * (1j * w) ** n)
    return z, [-z / q, -z * (np.log(w) + 0.5j * np.pi)]


def el_w(p, w):
    k = (1 - 1j) / np.sqrt(w)
    return p[0] * k, [k]


def el_wt(p, w):
    # r tanh(s)/s; d/dtau through ds/dtau = s/(2 tau); d(tanh s / s)/ds = (s sech^2 s - tanh s)/s^2.
    r, tau = p
    s = np.sqrt(1j * w * tau)
    t = np.tanh(s)
    f = t / s
    df_ds = (s * (1 - t * t) - t) / (s * s)
    return r * f, [f, r * df_ds * s / (2 * tau)]


def el_wr(p, w):
    # r coth(s)/s; d(coth s / s)/ds = (-s csch^2 s - coth s)/s^2 with csch^2 = coth^2 - 1.
    r, tau = p
    s = np.sqrt(1j * w * tau)
    c = 1 / np.tanh(s)
    f = c / s
    df_ds = (-s * (c * c - 1) - c) / (s * s)
    return r * f, [f, r * df_ds * s / (2 * tau)]


ELEMENTS = {"R": (el_r, 1), "L": (el_l, 1), "Q": (el_q, 2), "W": (el_w, 1), "Wt": (el_wt, 2), "Wr": (el_wr, 2)}


# --- circuits as trees: ("E", kind), ("S", children), ("P", children) -------------------------------


def evaluate(tree, p, w):
    """Z and dZ/dp (rows over parameters) of a tree; parameters consumed left to right."""
    grads = np.zeros((len(p), len(w)), dtype=complex)

    def go(node, k):
        tag = node[0]
        if tag == "E":
            fn, m = ELEMENTS[node[1]]
            z, d = fn(p[k : k + m], w)
            for i in range(m):
                grads[k + i] = d[i]
            return z, k, k + m
        parts = []
        k0 = k
        for ch in node[1]:
            z, a, k = go(ch, k)
            parts.append((z, a, k))
        if tag == "S":
            return sum(z for z, _, _ in parts), k0, k
        y = sum(1 / z for z, _, _ in parts)
        ztot = 1 / y
        for z, a, b in parts:
            grads[a:b] *= (ztot / z) ** 2
        return ztot, k0, k

    z, _, _ = go(tree, 0)
    return z, grads


def E(kind):
    return ("E", kind)


def S(*ch):
    return ("S", list(ch))


def P(*ch):
    return ("P", list(ch))


FAMILIES = {
    "one arc": ("R0 + Rct|Qdl", ["R0", "Rct", "Qdl.Q", "Qdl.n"], S(E("R"), P(E("R"), E("Q")))),
    "two arcs": (
        "R0 + Rf|Qf + Rct|Qdl",
        ["R0", "Rf", "Qf.Q", "Qf.n", "Rct", "Qdl.Q", "Qdl.n"],
        S(E("R"), P(E("R"), E("Q")), P(E("R"), E("Q"))),
    ),
    "arc + Warburg": (
        "R0 + (Rct + W1)|Qdl",
        ["R0", "Rct", "W1.sigma", "Qdl.Q", "Qdl.n"],
        S(E("R"), P(S(E("R"), E("W")), E("Q"))),
    ),
    "two arcs + Wt": (
        "R0 + Rf|Qf + (Rct + Wtd)|Qdl",
        ["R0", "Rf", "Qf.Q", "Qf.n", "Rct", "Wtd.R", "Wtd.tau", "Qdl.Q", "Qdl.n"],
        S(E("R"), P(E("R"), E("Q")), P(S(E("R"), E("Wt")), E("Q"))),
    ),
    "L + two arcs + Wr": (
        "L0 + R0 + Rf|Qf + (Rct + Wrd)|Qdl",
        ["L0", "R0", "Rf", "Qf.Q", "Qf.n", "Rct", "Wrd.R", "Wrd.tau", "Qdl.Q", "Qdl.n"],
        S(E("L"), E("R"), P(E("R"), E("Q")), P(S(E("R"), E("Wr")), E("Q"))),
    ),
}


def impedance(family, p, w=OMEGAS):
    return evaluate(FAMILIES[family][2], np.asarray(p, dtype=float), w)


def resistance_indices(family):
    """Resistances compared with the truth: R0, arc resistances and diffusion resistances."""
    names = FAMILIES[family][1]
    return [k for k, n in enumerate(names) if n[0] == "R" or n.endswith(".R")]


# Families whose arcs are the same block (R|Q in series, nothing else inside): their labels are a
# convention, not a property of the optimum. eis orders such arcs by increasing time constant, a
# single local fit keeps whatever order its start had; comparisons of resistances put both in
# that order first (`canonical`), so that one optimum under two labellings is not counted as two.
IDENTICAL_ARCS = {"two arcs": [(1, 2, 3), (4, 5, 6)]}


def canonical(family, p):
    """p with identical arcs (R, Q, n) in increasing order of their time constant (RQ)^(1/n)."""
    arcs = IDENTICAL_ARCS.get(family)
    p = list(p)
    if not arcs:
        return p
    blocks = sorted(([p[i] for i in a] for a in arcs), key=lambda b: (b[0] * b[1]) ** (1.0 / b[2]))
    for a, b in zip(arcs, blocks):
        for i, v in zip(a, b):
            p[i] = v
    return p


def exponent_indices(family):
    return [k for k, n in enumerate(FAMILIES[family][1]) if n.endswith(".n")]


# --- draws -------------------------------------------------------------------------------------------


def loguniform(rng, lo, hi):
    return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))


def q_for(r, f_apex, n):
    # The apex of R|Q lies at omega = (R Q)^(-1/n).
    return 1.0 / (r * (2 * np.pi * f_apex) ** n)


def draw(rng, family):
    r0 = loguniform(rng, 1e-3, 1.0)
    rf = r0 * loguniform(rng, 0.1, 3)
    rct = r0 * loguniform(rng, 0.3, 10)
    f_film = loguniform(rng, 300, 1e4)
    f_ct = f_film / loguniform(rng, 10, min(1000, f_film / 0.3))
    nf, nct = rng.uniform(0.75, 0.95), rng.uniform(0.75, 0.95)
    l0 = r0 * loguniform(rng, 0.1, 3) / (2 * np.pi * 1e5)
    tau_ct = 1 / (2 * np.pi * f_ct)
    rd = rct * loguniform(rng, 0.3, 3)
    taud = min(loguniform(rng, 10, 300) * tau_ct, 30.0)
    if family == "one arc":
        f1 = loguniform(rng, 1, 3e3)
        return [r0, rct, q_for(rct, f1, nct), nct]
    if family == "two arcs":
        return [r0, rf, q_for(rf, f_film, nf), nf, rct, q_for(rct, f_ct, nct), nct]
    if family == "arc + Warburg":
        sigma = rct * loguniform(rng, 0.02, 0.5) * np.sqrt(2 * np.pi * f_ct)
        return [r0, rct, sigma, q_for(rct, f_ct, nct), nct]
    if family == "two arcs + Wt":
        return [r0, rf, q_for(rf, f_film, nf), nf, rct, rd, taud, q_for(rct, f_ct, nct), nct]
    return [l0, r0, rf, q_for(rf, f_film, nf), nf, rct, rd, taud, q_for(rct, f_ct, nct), nct]


def generate(n, seed):
    """n spectra, the families in turn; each a dict with family, truth, noise, z (complex array)."""
    rng = np.random.default_rng(seed)
    fams = list(FAMILIES)
    cases = []
    for k in range(n):
        family = fams[k % len(fams)]
        truth = draw(rng, family)
        z0, _ = impedance(family, truth)
        noise = loguniform(rng, 1e-3, 1e-2)
        z = z0 + noise * np.abs(z0) * (rng.standard_normal(len(z0)) + 1j * rng.standard_normal(len(z0)))
        cases.append({"family": family, "truth": truth, "noise": noise, "z": z})
    return cases


# --- the data-driven start ---------------------------------------------------------------------------


def local_maxima(y):
    return [i for i in range(1, len(y) - 1) if y[i] > 0 and y[i] >= y[i - 1] and y[i] > y[i + 1]]


def data_start(family, z):
    """A common-practice start read off the spectrum (frequencies high to low)."""
    n0 = 0.85
    y = -z.imag
    cross = next((i for i in range(len(z)) if z.imag[i] <= 0), None)
    if cross is not None and cross > 0:
        a, b = z[cross - 1], z[cross]
        r0 = a.real + (b.real - a.real) * a.imag / (a.imag - b.imag)
    else:
        r0 = z[0].real
    r0 = max(r0, 1e-3 * abs(z).min())
    l0 = z[0].imag / OMEGAS[0] if z[0].imag > 0 else 1e-3 * abs(z).min() / OMEGAS[0]
    peaks = sorted(sorted(local_maxima(y), key=lambda i: -y[i])[:3])
    r_end = max(z[-1].real - r0, 1e-3 * r0)

    def valley(i, j):
        k = i + int(np.argmin(y[i : j + 1]))
        return max(z[k].real - r0, 1e-6)

    if family == "one arc":
        ip = peaks[0] if peaks else int(np.argmax(y))
        return [r0, r_end, q_for(r_end, FREQS[ip], n0), n0]
    if family == "arc + Warburg":
        ip = peaks[0] if peaks else int(np.argmax(y))
        k_end = min(range(ip, len(y)), key=lambda k: y[k])
        rct = max(z[k_end].real - r0, 1e-3 * r0)
        # The tail's slope: Re Z rises by sigma/sqrt(omega) beyond the arc.
        sigma = max((z[-1].real - z[k_end].real) / (1 / np.sqrt(OMEGAS[-1]) - 1 / np.sqrt(OMEGAS[k_end]) + 1e-300), 1e-3 * rct * np.sqrt(OMEGAS[-1]))
        return [r0, rct, sigma, q_for(rct, FREQS[ip], n0), n0]
    if len(peaks) >= 2:
        i_f, i_ct = peaks[0], peaks[1]
        rf = valley(i_f, i_ct)
    else:
        i_ct = peaks[0] if peaks else int(np.argmax(y))
        i_f = max(i_ct - 10, 0)
        rf = r_end / 3
    if family == "two arcs":
        rct = max(r_end - rf, 1e-3 * rf)
        return [r0, rf, q_for(rf, FREQS[i_f], n0), n0, rct, q_for(rct, FREQS[i_ct], n0), n0]
    # Diffusion families: the charge-transfer arc ends at the minimum of -Im Z below its apex; what the
    # real part adds after it is diffusion.
    k_end = min(range(i_ct, len(y)), key=lambda k: y[k])
    rct = max(z[k_end].real - r0 - rf, 1e-3 * rf)
    rd = max(z[-1].real - z[k_end].real, 0.3 * rct)
    later = [i for i in peaks if i > k_end]
    if family == "two arcs + Wt":
        taud = 2.5 / OMEGAS[later[0]] if later else 2.5 / OMEGAS[-1]
        return [r0, rf, q_for(rf, FREQS[i_f], n0), n0, rct, rd, taud, q_for(rct, FREQS[i_ct], n0), n0]
    # Reflective: the tail turns capacitive near omega tau = 3; take the end of the window.
    rd = 3 * rd
    taud = 3 / OMEGAS[-1]
    return [l0, r0, rf, q_for(rf, FREQS[i_f], n0), n0, rct, rd, taud, q_for(rct, FREQS[i_ct], n0), n0]


# --- the reference fit: SciPy least_squares with the closed-form Jacobian ---------------------------


class Reference:
    """Weighted residuals (Z_model - Z_data)/|Z_data|, real parts over imaginary parts, on internal
    coordinates: log of positive parameters, CPE exponents as they are, bounded to (0, 1]."""

    def __init__(self, family, z):
        self.family = family
        self.z = z
        self.w = 1 / np.abs(z)
        self.exps = exponent_indices(family)
        self.pos = [k for k in range(len(FAMILIES[family][1])) if k not in self.exps]

    def params(self, x):
        p = np.array(x, dtype=float)
        p[self.pos] = np.exp(x[self.pos])
        return p

    def internal(self, p):
        x = np.array(p, dtype=float)
        x[self.pos] = np.log(x[self.pos])
        x[self.exps] = np.clip(x[self.exps], 1e-6, 1 - 1e-9)
        return x

    def residuals(self, x):
        with np.errstate(all="ignore"):
            zm, _ = impedance(self.family, self.params(x))
            r = (zm - self.z) * self.w
            out = np.concatenate([r.real, r.imag])
        return np.where(np.isfinite(out), out, 1e10)

    def jacobian(self, x):
        with np.errstate(all="ignore"):
            p = self.params(x)
            _, g = impedance(self.family, p)
            g = g * self.w
            g[self.pos] *= p[self.pos, None]  # d/d ln p = p d/dp
            out = np.concatenate([g.real, g.imag], axis=1).T
        return np.where(np.isfinite(out), out, 0.0)

    def bounds(self):
        m = len(FAMILIES[self.family][1])
        lo, hi = np.full(m, -np.inf), np.full(m, np.inf)
        lo[self.exps], hi[self.exps] = 0.0, 1.0
        return lo, hi


def check_jacobians(cases, per_family=4):
    """Largest relative difference between each family's closed-form Jacobian and central differences
    (step 1e-6 in internal coordinates), over a few cases per family at the truth and at the start."""
    worst = {}
    for fam in FAMILIES:
        sub = [c for c in cases if c["family"] == fam][:per_family]
        err = 0.0
        for c in sub:
            ref = Reference(fam, c["z"])
            for p in (c["truth"], data_start(fam, c["z"])):
                x = ref.internal(p)
                ja = ref.jacobian(x)
                jn = np.empty_like(ja)
                for k in range(len(x)):
                    h = 1e-6 * max(1.0, abs(x[k]))
                    up, dn = x.copy(), x.copy()
                    up[k] += h
                    dn[k] -= h
                    jn[:, k] = (ref.residuals(up) - ref.residuals(dn)) / (2 * h)
                scale = np.maximum(np.abs(jn).max(axis=0), 1e-12)
                err = max(err, float((np.abs(ja - jn) / scale).max()))
        worst[fam] = err
    return worst


def fixture(cases, results, count, path):
    """Writes the regression subset: `count` spectra, the families in turn, those where the automatic
    search of the run (or of the --prior run) found the highest chi-square relative to the best first,
    with SciPy's optimum."""
    fams = list(FAMILIES)

    def hardness(c):
        return -max(c[m]["chi_square"] / c["best"] for m in ("eis auto", "prior auto") if m in c)

    per = {f: sorted((c for c in cases if c["family"] == f), key=hardness) for f in fams}
    chosen = []
    while len(chosen) < count and any(per.values()):
        for f in fams:
            if per[f] and len(chosen) < count:
                chosen.append(per[f].pop(0))
    import scipy

    out = {
        "generated_by": "bench/compare_scipy.py --fixture (spectra from bench/heldout.py)",
        "python": sys.version.split()[0],
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "method": "scipy.optimize.least_squares (trf, closed-form Jacobian, x_scale='jac'), modulus weighting, "
        "log-transformed positive parameters, CPE exponents bounded to (0, 1], from a data-driven start and from "
        "the truth; chi_square is the lower of the two",
        "cases": [
            {
                "family": c["family"],
                "model": FAMILIES[c["family"]][0],
                "noise_relative": c["noise"],
                "truth": c["truth"],
                "frequency_hz": FREQS.tolist(),
                "z_real_ohm": c["z"].real.tolist(),
                "z_imag_ohm": c["z"].imag.tolist(),
                "scipy_params": min((c["scipy start"], c["scipy truth"]), key=lambda r: r["chi_square"])["params"],
                "chi_square": min(c["scipy start"]["chi_square"], c["scipy truth"]["chi_square"]),
            }
            for c in chosen
        ],
    }
    with open(path, "w") as fh:
        json.dump(out, fh, indent=1)
        fh.write("\n")


def main():
    ap = argparse.ArgumentParser(description="checks the closed-form Jacobians against central differences")
    ap.add_argument("--n", type=int, default=500)
    ap.add_argument("--seed", type=int, default=2026)
    args = ap.parse_args()
    worst = check_jacobians(generate(args.n, args.seed))
    for fam, e in worst.items():
        print(f"{fam:18s} largest relative Jacobian difference {e:.2e}")
    if max(worst.values()) > 1e-5:
        sys.exit("closed-form Jacobian disagrees with central differences")


if __name__ == "__main__":
    main()
