#!/usr/bin/env python3
"""Compares eis-core's automatic fit search with a general-purpose reference, SciPy's
`scipy.optimize.least_squares` (Virtanen et al. 2020, Nature Methods 17, 261) given each model's
Jacobian in closed form, on the held-out benchmark of bench/heldout.py (five battery-like families,
500 spectra by default; see that file for the draws and the data-driven start).

Fits, all with modulus weighting and the same relative tolerance (--tolerance, ftol = xtol = gtol):
  eis auto       eis_core::fit::fit from automatic starting values: the whole search, as `eis fit` runs it
  eis start      eis_core::fit::fit_from, one local fit from the data-driven start
  eis truth      eis_core::fit::fit_from the true parameters (only to find the best chi-square)
  scipy start    least_squares (trf, closed-form Jacobian, x_scale='jac') on log parameters with CPE
                 exponents bounded to (0, 1], from the data-driven start
  scipy truth    the same from the true parameters
  scipy fd       with --fd: scipy start with a 2-point finite-difference Jacobian instead (timing only)

"best": the lowest chi-square any of these fits reaches on a spectrum.
"right": eis auto's chi-square within 1.5 x best and every resistance (R0, arc and diffusion
resistances) within 5 % of those of the best fit: the search found the global optimum's basin.
Identical arcs (two R|Q arcs in series) are compared in increasing order of time constant on both
sides (heldout.canonical): one optimum under two labellings is the same optimum.
"truth": every resistance of eis auto within 5 % of the true value; "ceiling": the same for the best fit
(what the data allow at all).
Times: wall time of one call, measured inside Rust (Instant) and inside Python (perf_counter) around
the solver call. Each timed fit is run --repeat times back to back, in --passes passes over the whole
batch that alternate between eis auto and scipy start, and the shortest run counts (the usual estimate
free of interference from other processes on a shared machine). The ratio is the mean SciPy time of one
start over the mean eis time of the whole automatic search, per spectrum, on one core each.

Run from the repository root:

    cargo build --release -p eis-core --example fit_batch
    python3 bench/compare_scipy.py [--n 500] [--seed 2026] [--json results.json]
    python3 bench/compare_scipy.py --fixture tests/reference/search_fixture.json --fixture-n 40
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
sys.path.insert(0, HERE)
import heldout  # noqa: E402
from heldout import FAMILIES, FREQS  # noqa: E402


def scipy_fit(family, z, start, tol, repeat=1, jac="closed"):
    ref = heldout.Reference(family, z)
    x0 = ref.internal(start)
    jac_arg = ref.jacobian if jac == "closed" else "2-point"
    seconds = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        sol = least_squares(ref.residuals, x0, jac=jac_arg, bounds=ref.bounds(), method="trf", x_scale="jac",
                            xtol=tol, ftol=tol, gtol=tol)
        seconds = min(seconds, time.perf_counter() - t)
    return {
        "params": ref.params(sol.x).tolist(),
        "chi_square": float(np.sum(sol.fun**2)),
        "seconds": seconds,
        "nfev": int(sol.nfev),
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=500, help="number of spectra (default 500)")
    ap.add_argument("--seed", type=int, default=2026, help="numpy seed (default 2026)")
    ap.add_argument("--tolerance", type=float, default=1e-10, help="ftol = xtol = gtol (default 1e-10)")
    ap.add_argument("--repeat", type=int, default=3,
                    help="back-to-back runs of every timed fit, on both sides; the shortest counts (default 3)")
    ap.add_argument("--passes", type=int, default=3,
                    help="passes over the batch alternating eis and SciPy; the shortest run counts (default 3)")
    ap.add_argument("--fd", action="store_true", help="also time SciPy with a finite-difference Jacobian")
    ap.add_argument("--bin", default=os.path.join(ROOT, "target", "release", "examples", "fit_batch"))
    ap.add_argument("--json", help="write every case and result to this file")
    ap.add_argument("--fixture", help="write the regression subset (hardest cases for eis auto) to this file")
    ap.add_argument("--fixture-n", type=int, default=40)
    ap.add_argument("--prior", help="a --json file of an earlier run on the same spectra: its eis auto fits count "
                    "among the strategies for the best optimum (e.g. the previous search)")
    ap.add_argument("--misses", type=int, default=10, help="list at most this many spectra eis auto got wrong")
    args = ap.parse_args()

    worst_jac = heldout.check_jacobians(heldout.generate(args.n, args.seed))
    if max(worst_jac.values()) > 1e-5:
        sys.exit(f"closed-form Jacobian disagrees with central differences: {worst_jac}")
    cases = heldout.generate(args.n, args.seed)
    for c in cases:
        c["start"] = heldout.data_start(c["family"], c["z"])

    def batch(auto, starts):
        return {
            "tolerance": args.tolerance,
            "repeat": args.repeat,
            "auto": auto,
            "cases": [
                {
                    "model": FAMILIES[c["family"]][0],
                    "frequency_hz": FREQS.tolist(),
                    "z_real_ohm": c["z"].real.tolist(),
                    "z_imag_ohm": c["z"].imag.tolist(),
                    "starts": {k: c[k] for k in starts},
                }
                for c in cases
            ],
        }

    def run_eis(b):
        proc = subprocess.run([args.bin], input=json.dumps(b), capture_output=True, text=True, check=True)
        return json.loads(proc.stdout)["results"]

    if args.prior:
        with open(args.prior) as fh:
            prior = json.load(fh)["cases"]
        if len(prior) < len(cases) or any(abs(p["truth"][0] - c["truth"][0]) > 0 for p, c in zip(prior, cases)):
            sys.exit("--prior holds other spectra")
        for c, p in zip(cases, prior):
            c["prior auto"] = {k: p["eis auto"][k] for k in ("params", "chi_square")}
    for c, e in zip(cases, run_eis(batch(True, ["start", "truth"]))):
        c["eis auto"], c["eis start"], c["eis truth"] = e["auto"], e["start"], e["truth"]
        c["scipy start"] = scipy_fit(c["family"], c["z"], c["start"], args.tolerance, args.repeat)
        c["scipy truth"] = scipy_fit(c["family"], c["z"], c["truth"], args.tolerance)
        if args.fd:
            c["scipy fd"] = scipy_fit(c["family"], c["z"], c["start"], args.tolerance, args.repeat, jac="2-point")
        fits = ("eis auto", "eis start", "eis truth", "scipy start", "scipy truth") + (("prior auto",) if "prior auto" in c else ())
        c["best_fit"] = min(fits, key=lambda m: c[m]["chi_square"])
        c["best"] = c[c["best_fit"]]["chi_square"]
    # Later passes time the whole automatic search and SciPy's one start again, alternating.
    for _ in range(args.passes - 1):
        for c, e in zip(cases, run_eis(batch(True, []))):
            c["eis auto"]["seconds"] = min(c["eis auto"]["seconds"], e["auto"]["seconds"])
        for c in cases:
            t = scipy_fit(c["family"], c["z"], c["start"], args.tolerance, args.repeat)["seconds"]
            c["scipy start"]["seconds"] = min(c["scipy start"]["seconds"], t)

    def within(a, b, idx, family):
        a, b = heldout.canonical(family, a), heldout.canonical(family, b)
        return all(abs(a[k] - b[k]) <= 0.05 * abs(b[k]) for k in idx)

    for c in cases:
        idx = heldout.resistance_indices(c["family"])
        best_p = c[c["best_fit"]]["params"]
        auto = c["eis auto"]
        c["ratio"] = auto["chi_square"] / c["best"]
        c["right"] = c["ratio"] <= 1.5 and within(auto["params"], best_p, idx, c["family"])
        c["truth_ok"] = within(auto["params"], c["truth"], idx, c["family"])
        c["ceiling"] = within(best_p, c["truth"], idx, c["family"])

    fams = list(FAMILIES) + ["all"]
    print(f"SciPy {scipy.__version__}, NumPy {np.__version__}, Python {sys.version.split()[0]}; "
          f"{len(cases)} spectra (bench/heldout.py, seed {args.seed}), tolerance {args.tolerance:g}, "
          f"best of {args.repeat} runs x {args.passes} passes")
    print("closed-form Jacobians against central differences, largest relative difference: "
          + ", ".join(f"{f} {e:.1e}" for f, e in worst_jac.items()))
    print(f"\n{'family':18s} {'n':>4s} {'right':>7s} {'worst chi2/best':>16s} {'truth':>7s} {'ceiling':>8s} "
          f"{'scipy start right':>18s}")
    for fam in fams:
        sub = [c for c in cases if fam == "all" or c["family"] == fam]
        sc_right = np.mean([c["scipy start"]["chi_square"] <= 1.5 * c["best"] for c in sub])
        print(f"{fam:18s} {len(sub):4d} {100 * np.mean([c['right'] for c in sub]):6.1f}% "
              f"{max(c['ratio'] for c in sub):16.3f} {100 * np.mean([c['truth_ok'] for c in sub]):6.1f}% "
              f"{100 * np.mean([c['ceiling'] for c in sub]):7.1f}% {100 * sc_right:17.1f}%")

    print("\nwall time of one spectrum, one core (ms): eis auto = the whole automatic search, "
          "scipy start = one local fit")
    hdr = f"{'family':18s} {'eis auto mean':>13s} {'median':>8s} {'max':>8s} {'eis start':>10s} {'scipy start':>12s}"
    if args.fd:
        hdr += f" {'scipy fd':>9s}"
    print(hdr + f" {'scipy start / eis auto':>23s}")
    for fam in fams:
        sub = [c for c in cases if fam == "all" or c["family"] == fam]
        auto = [1e3 * c["eis auto"]["seconds"] for c in sub]
        sc = np.mean([1e3 * c["scipy start"]["seconds"] for c in sub])
        line = (f"{fam:18s} {np.mean(auto):13.3f} {np.median(auto):8.3f} {max(auto):8.2f} "
                f"{np.mean([1e3 * c['eis start']['seconds'] for c in sub]):10.3f} {sc:12.2f}")
        if args.fd:
            line += f" {np.mean([1e3 * c['scipy fd']['seconds'] for c in sub]):9.2f}"
        print(line + f" {sc / np.mean(auto):23.1f}")
    starts = [c["eis auto"]["starts_tried"] for c in cases]
    evals = [c["eis auto"]["evaluations"] for c in cases]
    print(f"\neis auto: {np.mean(starts):.1f} local fits and {np.mean(evals):.0f} model evaluations per spectrum on average")

    fails = [(k, c) for k, c in enumerate(cases) if not c["right"]]
    print(f"eis auto missed the best optimum in {len(fails)} of {len(cases)} spectra")
    for k, c in sorted(fails, key=lambda kc: -kc[1]["ratio"])[: args.misses]:
        names = FAMILIES[c["family"]][1]
        print(f"  case {k} ({c['family']}, noise {100 * c['noise']:.2f} %): chi2 {c['eis auto']['chi_square']:.6e} "
              f"= {c['ratio']:.3f} x best ({c['best_fit']})")
        print("    truth " + " ".join(f"{n}={v:.4g}" for n, v in zip(names, c["truth"])))
        print("    best  " + " ".join(f"{n}={v:.4g}" for n, v in zip(names, c[c["best_fit"]]["params"])))
        print("    eis   " + " ".join(f"{n}={v:.4g}" for n, v in zip(names, c["eis auto"]["params"])))

    if args.fixture:
        heldout.fixture(cases, None, args.fixture_n, args.fixture)
        print(f"wrote {args.fixture}")
    if args.json:
        for c in cases:
            c["z_real_ohm"], c["z_imag_ohm"] = c["z"].real.tolist(), c["z"].imag.tolist()
            del c["z"]
        with open(args.json, "w") as fh:
            json.dump({"generated_by": "bench/compare_scipy.py", "seed": args.seed, "cases": cases}, fh, indent=1,
                      default=float)


if __name__ == "__main__":
    main()
