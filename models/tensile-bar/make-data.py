#!/usr/bin/env python3
"""Make the INVENTED example field data for the tensile-bar example.

Build the simulator first, then run from the repository root:

    cargo build --release -p tensile-bar
    python3 models/tensile-bar/make-data.py

Writes models/tensile-bar/field-A.csv and models/tensile-bar/field-B.csv
(header `displacement,force`; displacement in mm, force in kN).
Python 3 standard library only. See models/tensile-bar/DATA.md.

Invented here: the "true" material values, the noise and so the data. The specimen
gauge dimensions and grip widths are not invented: they are those of the usual standard
(50 x 12.5 mm gauge, 20 mm grips) and sub-size (25 x 6 mm gauge, 10 mm grips) flat
specimens of common tension-test practice (from memory); the thickness, end lengths and
taper are our choices. The data are for demonstrating calibration, not for design.

The forces are not computed here: the script renders bar.tmpl (the same template
assay renders for every run) at the invented true values and the experiment's
settings, calls the built simulator ../../target/release/tensile-bar on it, reads
the force at the field displacements and adds seeded Gaussian noise.
"""

import csv
import os
import random
import re
import subprocess
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
BINARY = os.path.join(HERE, "..", "..", "target", "release", "tensile-bar")
TEMPLATE = os.path.join(HERE, "bar.tmpl")

# INVENTED "true" material values used to make the data. b = 25 makes the hardening
# saturate (1 - exp(-25 * 0.06) = 78 %) within the ~6 % plastic strain the tests
# reach, so that Q and b can be told apart; see DATA.md.
TRUE = {"E": 70.0, "sigma0": 270.0, "Q": 50.0, "b": 25.0}  # GPa, MPa, MPa, -
SEED = 20250214
# (file, experiment settings as in study.yaml, field displacements in mm, noise sd in kN).
# The displacements skip the band where first yield falls somewhere in the parameter
# box of study.yaml (about 0.21-0.49 mm for A, 0.10-0.24 mm for B): there the force is
# a kinked function of E and sigma0, which a smooth GP surrogate emulates poorly.
# They lie on the simulated grid (displacement_max / 70 steps), so assay matches them
# exactly.
EXPERIMENTS = [
    (
        "field-A.csv",
        {"gauge_length": 50.0, "gauge_width": 12.5, "grip_length": 30.0,
         "grip_width": 20.0, "displacement_max": 3.5},
        [0.05, 0.1, 0.15, 0.2, 0.55, 0.65, 0.8, 1.0, 1.3, 1.8, 2.5, 3.5],
        0.05,
    ),
    (
        "field-B.csv",
        {"gauge_length": 25.0, "gauge_width": 6.0, "grip_length": 15.0,
         "grip_width": 10.0, "displacement_max": 1.75},
        [0.025, 0.05, 0.075, 0.1, 0.275, 0.325, 0.4, 0.5, 0.65, 0.9, 1.25, 1.75],
        0.03,
    ),
]


def number(v):
    """Shortest form that reads back to the same double (as assay renders numbers)."""
    return repr(float(v))


def render(template, values):
    def sub(m):
        return number(values[m.group(1)])
    return re.sub(r"\{\{\s*([A-Za-z_][A-Za-z0-9_]*)\s*\}\}", sub, template)


def simulate(settings):
    """Forces (kN) by displacement (mm) from the built simulator at the true values."""
    with open(TEMPLATE) as f:
        template = f.read()
    with tempfile.TemporaryDirectory() as d:
        inp = os.path.join(d, "bar.inp")
        out = os.path.join(d, "forces.csv")
        with open(inp, "w") as f:
            f.write(render(template, dict(TRUE, **settings)))
        subprocess.run([BINARY, inp, "--out", out], check=True)
        with open(out, newline="") as f:
            return [(float(r["displacement"]), float(r["force"])) for r in csv.DictReader(f)]


def force_at(curve, x):
    for d, f in curve:
        if abs(d - x) <= 1e-9 * max(1.0, abs(x)):
            return f
    raise SystemExit("displacement {} mm is not on the simulated grid".format(x))


def main():
    if not os.path.exists(BINARY):
        raise SystemExit("build the simulator first: cargo build --release -p tensile-bar")
    rng = random.Random(SEED)
    for fname, settings, xs, sd in EXPERIMENTS:
        curve = simulate(settings)
        rows = ["displacement,force"]
        for x in xs:
            y = force_at(curve, x) + rng.gauss(0.0, sd)
            rows.append("{},{:.4f}".format(x, y))
        with open(os.path.join(HERE, fname), "w", newline="\n") as f:
            f.write("\n".join(rows) + "\n")


if __name__ == "__main__":
    main()
