"""Shared by the reference scripts of this folder: the provenance keys that open a fixture, the
least-squares settings of the fit references, and writing a fixture beside the scripts.

Each script imports it by name (Python puts the running script's folder on the module path), so every
script still runs as its header says, e.g. `python3 tests/reference/fit_reference.py`.
"""

import json
import os
import sys

# Tolerance of the least-squares references on chi-square, step and gradient.
TOL = 1e-15

# scipy.optimize.least_squares settings of the fit references (trust-region reflective, Jacobian
# scaling, tolerance TOL on chi-square, step and gradient).
LEAST_SQUARES = dict(method="trf", x_scale="jac", xtol=TOL, ftol=TOL, gtol=TOL, max_nfev=20000)


def provenance(script, **versions):
    """The first keys of a fixture: the script that wrote it (path from the repository root), the
    Python version, then `versions` (library name -> version string) in the order given."""
    doc = {"generated_by": script, "python": sys.version.split()[0]}
    doc.update(versions)
    return doc


def write_fixture(name, doc):
    """Writes `doc` as JSON (indent 1, final newline) to the file `name` beside this module and
    returns its path."""
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), name)
    with open(path, "w") as fh:
        json.dump(doc, fh, indent=1)
        fh.write("\n")
    return path
