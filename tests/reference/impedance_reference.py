#!/usr/bin/env python3
"""Reference impedances of nested circuits, computed independently of the Rust code with mpmath at
50 significant digits straight from the element formulas (closed forms, no series expansions).

Writes impedance_fixture.json beside this script. Regenerate with:

    pip install mpmath
    python3 tests/reference/impedance_reference.py

The parameter order of each entry is the order in which `eis-core` numbers the parameters of the
circuit text (elements left to right, each kind's parameters in table order).
"""

import mpmath as mp

from fixture_io import provenance, write_fixture

mp.mp.dps = 50
J = mp.mpc(0, 1)


def R(r, w):
    return mp.mpc(r)


def C(c, w):
    return 1 / (J * w * c)


def L(l, w):
    return J * w * l


def Q(q, n, w):
    return 1 / (q * (J * w) ** n)


def W(sigma, w):
    return sigma * (1 - J) / mp.sqrt(w)


def Wt(r, tau, w):
    s = mp.sqrt(J * w * tau)
    return r * mp.tanh(s) / s


def Wr(r, tau, w):
    s = mp.sqrt(J * w * tau)
    return r * mp.coth(s) / s


def G(r, tau, w):
    return r / mp.sqrt(1 + J * w * tau)


def par(*zs):
    return 1 / sum(1 / z for z in zs)


CIRCUITS = [
    (
        "R0 + Rct|Qdl",
        [10, 100, 1e-5, 0.8],
        lambda p, w: R(p[0], w) + par(R(p[1], w), Q(p[2], p[3], w)),
    ),
    (
        "R0 + (Rct + W1)|Qdl",
        [1.5, 20, 7, 2e-4, 0.9],
        lambda p, w: R(p[0], w) + par(R(p[1], w) + W(p[2], w), Q(p[3], p[4], w)),
    ),
    (
        "R0 + (Rct + Wtd)|Qdl",
        [1, 10, 20, 5, 1e-4, 0.9],
        lambda p, w: R(p[0], w) + par(R(p[1], w) + Wt(p[2], p[3], w), Q(p[4], p[5], w)),
    ),
    (
        "R0 + (Rct + Wrd)|Cdl",
        [0.3, 4, 12, 50, 3e-3],
        lambda p, w: R(p[0], w) + par(R(p[1], w) + Wr(p[2], p[3], w), C(p[4], w)),
    ),
    (
        "L0 + R0 + Rfilm|Qfilm + (Rct + Wtd)|Qdl",
        [5e-7, 0.05, 0.02, 5e-3, 0.85, 0.1, 0.2, 20, 0.5, 0.93],
        lambda p, w: L(p[0], w)
        + R(p[1], w)
        + par(R(p[2], w), Q(p[3], p[4], w))
        + par(R(p[5], w) + Wt(p[6], p[7], w), Q(p[8], p[9], w)),
    ),
    (
        "R1|(R2 + C2|(R3 + G3))|Q4",
        [50, 5, 1e-6, 2, 8, 1e-3, 1e-5, 0.7],
        lambda p, w: par(
            R(p[0], w),
            R(p[1], w) + par(C(p[2], w), R(p[3], w) + G(p[4], p[5], w)),
            Q(p[6], p[7], w),
        ),
    ),
    (
        "(R1 + L1)|C1 + Wr2|R2",
        [2, 1e-3, 1e-6, 30, 0.01, 100],
        lambda p, w: par(R(p[0], w) + L(p[1], w), C(p[2], w)) + par(Wr(p[3], p[4], w), R(p[5], w)),
    ),
]


def main():
    freqs = [mp.mpf(10) ** (mp.mpf(k) / 3 - 6) for k in range(0, 43)]  # 1 uHz .. 100 MHz
    out = provenance("tests/reference/impedance_reference.py", mpmath=mp.__version__)
    out |= {"digits": mp.mp.dps, "circuits": []}
    for model, params, z in CIRCUITS:
        ps = [mp.mpf(repr(float(v))) for v in params]
        f_out, re_out, im_out = [], [], []
        for f in freqs:
            w = 2 * mp.pi * mp.mpf(float(f))
            val = z(ps, w)
            f_out.append(float(f))
            re_out.append(float(val.real))
            im_out.append(float(val.imag))
        out["circuits"].append(
            {
                "model": model,
                "params": [float(v) for v in params],
                "frequency_hz": f_out,
                "z_real_ohm": re_out,
                "z_imag_ohm": im_out,
            }
        )
    path = write_fixture("impedance_fixture.json", out)
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
