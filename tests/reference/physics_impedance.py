#!/usr/bin/env python3
"""Impedance spectra of physics-based lithium-ion cell models, computed with PyBaMM (a general-purpose
battery modelling library), with reference values taken from the models' own parameters.

The spectra are data that nobody here wrote: the porous-electrode (Doyle-Fuller-Newman) and
single-particle-with-electrolyte models, with double layers at the particle surfaces, respond with
transmission-line branches, distributed arcs and open diffusion tails, as real cells do.

Method (time domain, no linearised model): for each frequency f the cell, at rest at its state of
charge, is driven by a small sinusoidal current I(t) = A sin(2 pi f t) (positive = discharge) for
`PERIODS` periods; over the last two whole periods the voltage is fitted by least squares with a
quadratic drift plus sin and cos at f, and Z = -(a_sin + j a_cos) / A. Each spectrum is computed at
amplitudes A and A/2; their largest relative difference is stored as `linearity` (small-signal check),
and the stored value is the Richardson extrapolation to zero amplitude, (4 Z(A/2) - Z(A)) / 3, which
removes the leading (A^2) distortion of the fundamental.

Reference values (per spectrum, SI units, at the initial rest state):
- charge-transfer resistance of electrode k: R_ct,k = R T / (F i0,k a_k L_k S), with i0 the exchange
  current density of the symmetric Butler-Volmer law, a the particle surface per volume, L the electrode
  thickness and S the electrode area (height x width x electrodes in parallel);
- ionic resistance of the separator and of each electrode's pores, L / (kappa(c_e0, T) eps^b S)
  (Bruggeman), electronic resistance of each electrode's solid, L / (sigma eps_s^b_s S);
- the high-frequency limit of the two-rail transmission line per electrode, R_ion R_el / (R_ion + R_el),
  summed with the separator and the contact resistance;
- double-layer time constants tau_dl,k = C_dl,k R T / (F i0,k).

Sources: Doyle, Fuller & Newman 1993, J. Electrochem. Soc. 140, 1526 (the porous-electrode model);
Marquis, Sulzer, Timms, Please & Chapman 2019, J. Electrochem. Soc. 166, A3693 (single particle model
with electrolyte, and its parameter set); Chen, Planella, O'Regan, Gastol, Widanage & Kendrick 2020,
J. Electrochem. Soc. 167, 080534 (the LG M50 parameter set); Sulzer, Marquis, Timms, Robinson & Chapman
2021, J. Open Research Software 9, 14 (PyBaMM).

Writes physics_impedance_fixture.json beside this script (CI reads the fixture and needs no Python).
Regenerate with (about ten minutes on one core):

    python3 -m venv venv && venv/bin/pip install pybamm
    venv/bin/python tests/reference/physics_impedance.py
"""
import json
import sys
import time

import numpy as np
import pybamm

from fixture_io import provenance, write_fixture

R_GAS = 8.314462618  # J/(mol K), CODATA 2018 exact value of N_A k
FARADAY = 96485.33212  # C/mol, CODATA 2018 exact value of N_A e
PERIODS = 4
SAMPLES_PER_PERIOD = 64
FREQUENCIES = 10.0 ** np.linspace(4, -2, 61)  # 10 kHz down to 10 mHz, 10 per decade

pybamm.set_logging_level("ERROR")


def scaled(fn, factor):
    """A parameter function multiplied by a constant factor."""
    return lambda *args: factor * fn(*args)


def evaluate(pv, name, *args):
    """Value of a parameter that may be a function of its arguments."""
    value = pv[name]
    if callable(value):
        return float(pv.evaluate(value(*[pybamm.Scalar(a) for a in args])))
    return float(value)


class Cell:
    """One model with one parameter set, driven by a sinusoidal current of chosen frequency."""

    def __init__(self, model_name, parameter_set, variant):
        options = {"surface form": "differential", "contact resistance": "true"}
        model = {
            "DFN": pybamm.lithium_ion.DFN,
            "SPMe": pybamm.lithium_ion.SPMe,
        }[model_name](options=options)
        pv = pybamm.ParameterValues(parameter_set)
        pv.update({"Contact resistance [Ohm]": 0.0})
        if variant.get("exchange_current_factor"):
            k = variant["exchange_current_factor"]
            for e in ("Negative", "Positive"):
                name = f"{e} electrode exchange-current density [A.m-2]"
                pv[name] = scaled(pv[name], k)
        if variant.get("conductivity_factor"):
            name = "Electrolyte conductivity [S.m-1]"
            pv[name] = scaled(pv[name], variant["conductivity_factor"])
        if variant.get("contact_resistance_ohm"):
            pv.update({"Contact resistance [Ohm]": variant["contact_resistance_ohm"]})
        amplitude = pybamm.InputParameter("Amplitude [A]")
        frequency = pybamm.InputParameter("Frequency [Hz]")
        pv["Current function [A]"] = lambda t: amplitude * pybamm.sin(2 * np.pi * frequency * t)
        self.pv = pv
        self.sim = pybamm.Simulation(
            model,
            parameter_values=pv,
            solver=pybamm.IDAKLUSolver(rtol=1e-9, atol=1e-10),
        )
        self.capacity = float(pv["Nominal cell capacity [A.h]"])

    def solve(self, f, amplitude, soc, periods=PERIODS):
        t_end = periods / f
        t = np.linspace(0.0, t_end, periods * SAMPLES_PER_PERIOD + 1)
        return self.sim.solve(
            t_eval=[0.0, t_end],
            t_interp=t,
            inputs={"Amplitude [A]": amplitude, "Frequency [Hz]": f},
            initial_soc=soc,
        )

    def impedance(self, f, amplitude, soc):
        sol = self.solve(f, amplitude, soc)
        t = sol.t
        v = sol["Voltage [V]"].entries
        keep = t >= t[-1] - 2.0 / f - 1e-12 / f
        tk = t[keep]
        tc = tk - tk.mean()
        w = 2 * np.pi * f
        x = np.column_stack([np.ones_like(tk), tc, tc * tc, np.sin(w * tk), np.cos(w * tk)])
        coef, *_ = np.linalg.lstsq(x, v[keep], rcond=None)
        return -(coef[3] + 1j * coef[4]) / amplitude

    def reference(self, soc):
        """Reference values from the model's parameters at the rest state of charge `soc`."""
        pv = self.pv
        sol = self.solve(1.0, 0.0, soc, periods=1)
        temperature = float(pv["Ambient temperature [K]"])
        c_e0 = float(pv["Initial concentration in electrolyte [mol.m-3]"])
        kappa = evaluate(pv, "Electrolyte conductivity [S.m-1]", c_e0, temperature)
        area = (
            float(pv["Electrode height [m]"])
            * float(pv["Electrode width [m]"])
            * float(pv["Number of electrodes connected in parallel to make a cell"])
        )
        rt_f = R_GAS * temperature / FARADAY
        out = {
            "temperature_k": temperature,
            "electrolyte_conductivity_s_per_m": kappa,
            "electrode_area_m2": area,
        }
        l_sep = float(pv["Separator thickness [m]"])
        eps_sep = float(pv["Separator porosity"])
        b_sep = float(pv["Separator Bruggeman coefficient (electrolyte)"])
        out["separator_resistance_ohm"] = l_sep / (kappa * eps_sep**b_sep * area)
        out["contact_resistance_ohm"] = float(pv["Contact resistance [Ohm]"])
        r_hf = out["separator_resistance_ohm"] + out["contact_resistance_ohm"]
        r_ct_total = 0.0
        for e, key in (("Negative", "negative"), ("Positive", "positive")):
            i0 = float(sol[f"X-averaged {key} electrode exchange current density [A.m-2]"].entries[0])
            a = float(sol[f"X-averaged {key} electrode surface area to volume ratio [m-1]"].entries[0])
            thickness = float(pv[f"{e} electrode thickness [m]"])
            eps = float(pv[f"{e} electrode porosity"])
            b = float(pv[f"{e} electrode Bruggeman coefficient (electrolyte)"])
            eps_s = float(pv[f"{e} electrode active material volume fraction"])
            b_s = float(pv[f"{e} electrode Bruggeman coefficient (electrode)"])
            sigma = float(pv[f"{e} electrode conductivity [S.m-1]"])
            c_dl = float(pv[f"{e} electrode double-layer capacity [F.m-2]"])
            r_ct = rt_f / (i0 * a * thickness * area)
            r_ion = thickness / (kappa * eps**b * area)
            r_el = thickness / (sigma * eps_s**b_s * area)
            out[f"{key}_exchange_current_density_a_per_m2"] = i0
            out[f"{key}_surface_per_volume_per_m"] = a
            out[f"{key}_charge_transfer_resistance_ohm"] = r_ct
            out[f"{key}_pore_ionic_resistance_ohm"] = r_ion
            out[f"{key}_solid_electronic_resistance_ohm"] = r_el
            out[f"{key}_double_layer_capacitance_f"] = c_dl * a * thickness * area
            out[f"{key}_double_layer_time_constant_s"] = c_dl * rt_f / i0
            r_ct_total += r_ct
            r_hf += r_ion * r_el / (r_ion + r_el)
        out["charge_transfer_resistance_ohm"] = r_ct_total
        out["high_frequency_limit_ohm"] = r_hf
        return out


CASES = [
    # (name, model, parameter set, SOC, variant)
    *[
        (f"dfn-chen2020-soc{int(s * 100)}", "DFN", "Chen2020", s, {})
        for s in (0.2, 0.5, 0.8)
    ],
    ("dfn-chen2020-soc50-i0x0.25", "DFN", "Chen2020", 0.5, {"exchange_current_factor": 0.25}),
    ("dfn-chen2020-soc50-kappax0.5", "DFN", "Chen2020", 0.5, {"conductivity_factor": 0.5}),
    ("dfn-chen2020-soc50-contact5m", "DFN", "Chen2020", 0.5, {"contact_resistance_ohm": 0.005}),
    *[
        (f"dfn-marquis2019-soc{int(s * 100)}", "DFN", "Marquis2019", s, {})
        for s in (0.2, 0.5, 0.8)
    ],
    ("dfn-marquis2019-soc50-i0x0.25", "DFN", "Marquis2019", 0.5, {"exchange_current_factor": 0.25}),
    ("dfn-marquis2019-soc50-contact5m", "DFN", "Marquis2019", 0.5, {"contact_resistance_ohm": 0.005}),
    *[
        (f"spme-chen2020-soc{int(s * 100)}", "SPMe", "Chen2020", s, {})
        for s in (0.2, 0.5, 0.8)
    ],
]


def main():
    spectra = []
    cells = {}
    for name, model_name, parameter_set, soc, variant in CASES:
        started = time.time()
        key = (model_name, parameter_set, json.dumps(variant, sort_keys=True))
        if key not in cells:
            cells[key] = Cell(model_name, parameter_set, variant)
        cell = cells[key]
        amplitude = cell.capacity / 100.0  # C/100: a few millivolts of response
        z = np.array([cell.impedance(f, amplitude, soc) for f in FREQUENCIES])
        z_half = np.array([cell.impedance(f, amplitude / 2, soc) for f in FREQUENCIES])
        linearity = float(np.max(np.abs(z - z_half) / np.abs(z)))
        z = (4.0 * z_half - z) / 3.0
        spectra.append(
            {
                "name": name,
                "model": model_name,
                "parameter_set": parameter_set,
                "soc": soc,
                "variant": variant,
                "amplitude_a": amplitude,
                "linearity": linearity,
                "frequency_hz": [float(f) for f in FREQUENCIES],
                "z_real_ohm": [float(v.real) for v in z],
                "z_imag_ohm": [float(v.imag) for v in z],
                "reference": cell.reference(soc),
            }
        )
        print(
            f"{name}: {time.time() - started:.1f} s, linearity {linearity:.1e}, "
            f"R_ct {spectra[-1]['reference']['charge_transfer_resistance_ohm'] * 1e3:.2f} mOhm",
            file=sys.stderr,
        )
    doc = provenance("tests/reference/physics_impedance.py", pybamm=pybamm.__version__, numpy=np.__version__)
    doc |= {
        "method": "time-domain small-signal sine, fundamental by least squares over the last two periods, "
        "Richardson-extrapolated to zero amplitude from A and A/2",
        "sign": "z_imag_ohm carries its own sign (capacitive < 0); frequencies high to low",
        "spectra": spectra,
    }
    write_fixture("physics_impedance_fixture.json", doc)


if __name__ == "__main__":
    main()
