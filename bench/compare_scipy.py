#!/usr/bin/env python3
"""Compares eis-core's fitting engine with a general-purpose reference, SciPy's
`scipy.optimize.least_squares` (Virtanen et al. 2020, Nature Methods 17, 261), on a few hundred
simulated battery spectra.

Spectra (numpy.random.default_rng(--seed); 100 kHz to 10 mHz, 10 points per decade, Gaussian noise
0.1-1 % of |Z| on real and imaginary parts, level log-uniform per spectrum). Three model families, drawn
over battery magnitudes (plausibility ranges of REFERENCES.md section 9, from memory there):
  one arc      R0 + Rct|Qdl
  two arcs     L0 + R0 + Rf|Qf + Rct|Qdl
  full cell    L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl
with R0 log-uniform in 1 mOhm..10 Ohm, Rf = R0 x 0.1..3, Rct = R0 x 0.3..10, film apex 200 Hz..20 kHz,
charge-transfer apex 10-1000 times lower (at least 0.5 Hz), CPE exponents 0.8..0.95, inductance giving
0.1..3 x R0 at 100 kHz, diffusion resistance 0.5..5 x Rct with its time constant 30..1000 times the
charge-transfer one (capped at 200 s).

Fits, all with modulus weighting and the same relative tolerance (--tolerance, ftol = xtol = gtol):
  eis auto       eis_core::fit::fit from automatic starting values
  eis start      eis_core::fit::fit_from, one local fit from the data-driven start below
  eis truth      eis_core::fit::fit_from the true parameters (only to find the best chi-square)
  scipy start    least_squares (trf, 2-point finite-difference Jacobian, x_scale='jac') on log
                 parameters with CPE exponents bounded to (0, 1], from the data-driven start
  scipy truth    the same from the true parameters
The data-driven start is a common-practice reading of the spectrum: high-frequency intercept (real part
where the imaginary part crosses zero) for R0, Im Z/omega at the highest frequency for L0, apices of
-Im Z for the arc time constants, real parts at the minima of -Im Z between them for the resistances.

"Global optimum reached": chi-square within 1e-6 relative of the lowest found by any of the five fits.
"Resistances within 5 %": every resistance parameter within 5 % of the truth. Times: wall time of one
fit, measured inside Rust (Instant) and inside Python (perf_counter) around the solver call. Each
timed fit is run --repeat times back to back, in --passes passes over the whole batch that alternate
between eis and SciPy, and the shortest run counts: the usual estimate free of interference from other
processes on a shared machine, with the passes spread over time so that a slow spell of the machine
cannot fall on one side only (eis auto and the truth fits are timed in the first pass only).

Run from the repository root:

    cargo build --release --example fit_batch
    python3 bench/compare_scipy.py [--n 300] [--seed 2024] [--json results.json]
"""
import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np
import scipy
from scipy.optimize import least_squares

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
sys.path.insert(0, os.path.join(ROOT, "tests", "reference"))
from fit_reference import L, Q, R, Wt, par, weighted_residuals  # noqa: E402

FAMILIES = {
    "one arc": (
        "R0 + Rct|Qdl",
        ["R0", "Rct", "Qdl.Q", "Qdl.n"],
        lambda p, w: R(p[0], w) + par(R(p[1], w), Q(p[2], p[3], w)),
    ),
    "two arcs": (
        "L0 + R0 + Rf|Qf + Rct|Qdl",
        ["L0", "R0", "Rf", "Qf.Q", "Qf.n", "Rct", "Qdl.Q", "Qdl.n"],
        lambda p, w: L(p[0], w) + R(p[1], w) + par(R(p[2], w), Q(p[3], p[4], w)) + par(R(p[5], w), Q(p[6], p[7], w)),
    ),
    "full cell": (
        "L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl",
        ["L0", "R0", "Rf", "Qf.Q", "Qf.n", "Rct", "Wtd.R", "Wtd.tau", "Qdl.Q", "Qdl.n"],
        lambda p, w: L(p[0], w)
        + R(p[1], w)
        + par(R(p[2], w), Q(p[3], p[4], w))
        + par(R(p[5], w) + Wt(p[6], p[7], w), Q(p[8], p[9], w)),
    ),
}
FREQS = 10.0 ** (5 - np.arange(71) / 10)
OMEGAS = 2 * np.pi * FREQS


def loguniform(rng, lo, hi):
    return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))


def q_for(r, f_apex, n):
    # Apex of R|Q at omega = (R Q)^(-1/n).
    return 1.0 / (r * (2 * np.pi * f_apex) ** n)


def draw(rng, family):
    r0 = loguniform(rng, 1e-3, 10)
    rf = r0 * loguniform(rng, 0.1, 3)
    rct = r0 * loguniform(rng, 0.3, 10)
    f_film = loguniform(rng, 200, 2e4)
    f_ct = max(f_film / loguniform(rng, 10, 1000), 0.5)
    nf, nct = rng.uniform(0.8, 0.95), rng.uniform(0.8, 0.95)
    l0 = r0 * loguniform(rng, 0.1, 3) / (2 * np.pi * 1e5)
    rd = rct * loguniform(rng, 0.5, 5)
    taud = min(loguniform(rng, 30, 1000) / (2 * np.pi * f_ct), 200.0)
    if family == "one arc":
        return [r0, rct, q_for(rct, f_ct, nct), nct]
    if family == "two arcs":
        return [l0, r0, rf, q_for(rf, f_film, nf), nf, rct, q_for(rct, f_ct, nct), nct]
    return [l0, r0, rf, q_for(rf, f_film, nf), nf, rct, rd, taud, q_for(rct, f_ct, nct), nct]


def local_maxima(y):
    return [i for i in range(1, len(y) - 1) if y[i] > 0 and y[i] >= y[i - 1] and y[i] > y[i + 1]]


def data_start(family, z):
    """A common-practice start read off the spectrum (frequencies high to low)."""
    n0 = 0.85
    y = -z.imag
    # High-frequency intercept: where an inductive start first crosses the real axis, else the
    # highest-frequency point.
    cross = next((i for i in range(len(z)) if z.imag[i] <= 0), None)
    if cross is not None and cross > 0:
        a, b = z[cross - 1], z[cross]
        r0 = a.real + (b.real - a.real) * a.imag / (a.imag - b.imag)
    else:
        r0 = z[0].real
    r0 = max(r0, 1e-3 * abs(z).min())
    l0 = z[0].imag / OMEGAS[0] if z[0].imag > 0 else 1e-3 * abs(z).min() / OMEGAS[0]
    peaks = local_maxima(y)
    peaks = sorted(peaks, key=lambda i: -y[i])[:3]
    peaks.sort()  # high frequency first
    r_end = max(z[-1].real - r0, 1e-3 * r0)

    def valley(i, j):
        k = i + int(np.argmin(y[i : j + 1]))
        return max(z[k].real - r0, 1e-6)

    if family == "one arc":
        ip = peaks[0] if peaks else int(np.argmax(y))
        rct = r_end
        return [r0, rct, q_for(rct, FREQS[ip], n0), n0]

    if len(peaks) >= 2:
        i_f, i_ct = peaks[0], peaks[1]
        rf = valley(i_f, i_ct)
    else:
        i_ct = peaks[0] if peaks else int(np.argmax(y))
        i_f = max(i_ct - 10, 0)  # a decade higher
        rf = r_end / 3
    if family == "two arcs":
        rct = max(r_end - rf, 1e-3 * rf)
        return [l0, r0, rf, q_for(rf, FREQS[i_f], n0), n0, rct, q_for(rct, FREQS[i_ct], n0), n0]

    # Full cell: the charge-transfer arc ends at the minimum of -Im Z below its apex; what the real part
    # adds after that is diffusion, whose tanh arc peaks near omega tau = 2.5 (or lies below the window).
    tail = range(i_ct, len(y))
    k_end = min(tail, key=lambda k: y[k])
    r_arc_end = max(z[k_end].real - r0, rf * 1.001)
    rct = max(r_arc_end - rf, 1e-3 * rf)
    rd = max(z[-1].real - r0 - rf - rct, 0.3 * rct)
    later = [i for i in peaks if i > k_end]
    taud = 2.5 / OMEGAS[later[0]] if later else 2.5 / OMEGAS[-1]
    return [l0, r0, rf, q_for(rf, FREQS[i_f], n0), n0, rct, rd, taud, q_for(rct, FREQS[i_ct], n0), n0]


def scipy_fit(zfun, names, z, start, tol, repeat=1):
    exps = [k for k, n in enumerate(names) if n.endswith(".n")]
    pos = [k for k in range(len(names)) if k not in exps]
    lower = np.full(len(names), -np.inf)
    upper = np.full(len(names), np.inf)
    lower[exps], upper[exps] = 0.0, 1.0
    x0 = np.array(start, dtype=float)
    x0[pos] = np.log(x0[pos])
    x0[exps] = np.clip(x0[exps], 1e-6, 1 - 1e-9)

    def to_params(x):
        p = x.copy()
        p[pos] = np.exp(x[pos])
        return p

    def res(x):
        # Trial points that overflow get large finite residuals (rejected steps), as in eis-core.
        with np.errstate(all="ignore"):
            r = weighted_residuals(zfun(to_params(x), OMEGAS), z)
        return np.where(np.isfinite(r), r, 1e10)

    seconds = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        sol = least_squares(res, x0, bounds=(lower, upper), method="trf", x_scale="jac", xtol=tol, ftol=tol, gtol=tol)
        seconds = min(seconds, time.perf_counter() - t)
    return {
        "params": to_params(sol.x).tolist(),
        "chi_square": float(np.sum(sol.fun**2)),
        "seconds": seconds,
        "nfev": int(sol.nfev),
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=300, help="number of spectra (default 300)")
    ap.add_argument("--seed", type=int, default=2024, help="numpy seed (default 2024)")
    ap.add_argument("--tolerance", type=float, default=1e-10, help="ftol = xtol = gtol (default 1e-10)")
    ap.add_argument("--repeat", type=int, default=3,
                    help="back-to-back runs of every timed fit, on both sides; the shortest counts (default 3)")
    ap.add_argument("--passes", type=int, default=3,
                    help="passes over the batch alternating eis and SciPy; the shortest run counts (default 3)")
    ap.add_argument("--bin", default=os.path.join(ROOT, "target", "release", "examples", "fit_batch"))
    ap.add_argument("--json", help="write every case and result to this file")
    args = ap.parse_args()

    rng = np.random.default_rng(args.seed)
    fams = list(FAMILIES)
    cases = []
    for k in range(args.n):
        family = fams[k % len(fams)]
        model, names, zfun = FAMILIES[family]
        truth = draw(rng, family)
        z0 = zfun(np.array(truth), OMEGAS)
        noise = loguniform(rng, 1e-3, 1e-2)
        z = z0 + noise * np.abs(z0) * (rng.standard_normal(len(z0)) + 1j * rng.standard_normal(len(z0)))
        cases.append({"family": family, "truth": truth, "noise": noise, "z": z, "start": data_start(family, z)})

    batch = {
        "tolerance": args.tolerance,
        "repeat": args.repeat,
        "cases": [
            {
                "model": FAMILIES[c["family"]][0],
                "frequency_hz": FREQS.tolist(),
                "z_real_ohm": c["z"].real.tolist(),
                "z_imag_ohm": c["z"].imag.tolist(),
                "starts": {"start": c["start"], "truth": c["truth"]},
            }
            for c in cases
        ],
    }
    def run_eis(batch):
        proc = subprocess.run([args.bin], input=json.dumps(batch), capture_output=True, text=True, check=True)
        return json.loads(proc.stdout)["results"]

    for c, e in zip(cases, run_eis(batch)):
        _, names, zfun = FAMILIES[c["family"]]
        c["eis auto"], c["eis start"], c["eis truth"] = e["auto"], e["start"], e["truth"]
        c["scipy start"] = scipy_fit(zfun, names, c["z"], c["start"], args.tolerance, args.repeat)
        c["scipy truth"] = scipy_fit(zfun, names, c["z"], c["truth"], args.tolerance)
        c["best"] = min(c[m]["chi_square"] for m in ("eis auto", "eis start", "eis truth", "scipy start", "scipy truth"))
    # Later passes time the fits from the data-driven start again, on both sides (same fits, same
    # results: only the shortest time is kept).
    again = dict(batch, auto=False, cases=[dict(b, starts={"start": b["starts"]["start"]}) for b in batch["cases"]])
    for _ in range(args.passes - 1):
        for c, e in zip(cases, run_eis(again)):
            c["eis start"]["seconds"] = min(c["eis start"]["seconds"], e["start"]["seconds"])
        for c in cases:
            _, names, zfun = FAMILIES[c["family"]]
            t = scipy_fit(zfun, names, c["z"], c["start"], args.tolerance, args.repeat)["seconds"]
            c["scipy start"]["seconds"] = min(c["scipy start"]["seconds"], t)

    methods = ["eis auto", "eis start", "scipy start"]

    def ok(c, m):
        return c[m]["chi_square"] <= c["best"] * (1 + 1e-6)

    def resist_ok(c, m):
        names = FAMILIES[c["family"]][1]
        idx = [k for k, n in enumerate(names) if n.startswith("R") or n == "Wtd.R"]
        return all(abs(c[m]["params"][k] - c["truth"][k]) <= 0.05 * c["truth"][k] for k in idx)

    print(f"SciPy {scipy.__version__}, NumPy {np.__version__}, Python {sys.version.split()[0]}; "
          f"{len(cases)} spectra, seed {args.seed}, tolerance {args.tolerance:g}, "
          f"best of {args.repeat} runs x {args.passes} passes")
    print(f"{'family':10s} {'n':>4s} | global optimum reached: " + " ".join(f"{m:>12s}" for m in methods)
          + " | resistances within 5 %: " + " ".join(f"{m:>12s}" for m in methods))
    for fam in fams + ["all"]:
        sub = [c for c in cases if fam == "all" or c["family"] == fam]
        g = " ".join(f"{100 * np.mean([ok(c, m) for c in sub]):11.1f}%" for m in methods)
        r = " ".join(f"{100 * np.mean([resist_ok(c, m) for c in sub]):11.1f}%" for m in methods)
        print(f"{fam:10s} {len(sub):4d} | {'':24s}{g} | {'':24s}{r}")

    print("\nmedian wall time of one fit (ms):")
    print(f"{'family':10s} {'eis auto':>10s} {'eis start':>10s} {'scipy start':>12s} {'ratio scipy/eis (same start)':>30s}")
    for fam in fams + ["all"]:
        sub = [c for c in cases if fam == "all" or c["family"] == fam]
        med = {m: 1e3 * float(np.median([c[m]["seconds"] for c in sub])) for m in methods}
        print(f"{fam:10s} {med['eis auto']:10.3f} {med['eis start']:10.4f} {med['scipy start']:12.2f} "
              f"{med['scipy start'] / med['eis start']:30.0f}")

    fails = [(k, c) for k, c in enumerate(cases) if not ok(c, "eis auto")]
    print(f"\neis auto missed the global optimum in {len(fails)} of {len(cases)} spectra")
    for k, c in fails:
        names = FAMILIES[c["family"]][1]
        print(f"  case {k} ({c['family']}, noise {100 * c['noise']:.2f} %): chi2 {c['eis auto']['chi_square']:.6e} "
              f"vs best {c['best']:.6e}")
        print("    truth " + " ".join(f"{n}={v:.4g}" for n, v in zip(names, c["truth"])))
        print("    eis   " + " ".join(f"{n}={v:.4g}" for n, v in zip(names, c["eis auto"]["params"])))

    if args.json:
        for c in cases:
            c["z_real_ohm"], c["z_imag_ohm"] = c["z"].real.tolist(), c["z"].imag.tolist()
            del c["z"]
        with open(args.json, "w") as fh:
            json.dump({"generated_by": "bench/compare_scipy.py", "seed": args.seed, "cases": cases}, fh, indent=1)


if __name__ == "__main__":
    main()
