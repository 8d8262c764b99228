#!/usr/bin/env python3
"""Make the INVENTED example field data for the cantilever example.

Run from the repository root:

    python3 models/cantilever/make-data.py

Writes models/cantilever/field-A.csv and models/cantilever/field-B.csv
(header `station,deflection`; station in m, deflection in mm).
Python 3 standard library only. See models/cantilever/DATA.md.

Everything here is invented: the scenario (a steel sign-post arm whose bolted
wall plate acts as a rotational spring), the "true" parameter values and the
noise. The data are for demonstrating calibration, not for design.

Deflection (same formula as the `cantilever` simulator, src/main.rs):

    w(x) = P x^2 (3L - x) / (6 E I) + P L x / k_theta

first term: Euler-Bernoulli cantilever under a tip load (Young & Budynas,
Roark's Formulas for Stress and Strain, 7th ed., 2002, Table 8.1, case 1a with
the load at the free end; table and case numbers from memory); second term: rigid rotation of the root spring
under the root moment P L.
"""

import os
import random

# Invented "true" values used to make the data.
E_GPA = 205.0  # Young's modulus, GPa
K_THETA_MNM = 1.8  # root rotational stiffness, MN*m/rad
# Fixed, known inputs.
LENGTH_M = 2.0  # m
INERTIA_CM4 = 800.0  # cm^4
STATIONS_M = [0.5, 1.0, 1.5, 2.0]
REPLICATES = 2
NOISE_SD_MM = 0.05  # invented Gaussian measurement noise, mm
SEED = 20250101
EXPERIMENTS = [("field-A.csv", 5.0), ("field-B.csv", 9.0)]  # (file, load in kN): bench-A, bench-B


def deflection_mm(x_m, load_kn, e_gpa=E_GPA, k_theta_mnm=K_THETA_MNM,
                  length_m=LENGTH_M, inertia_cm4=INERTIA_CM4):
    e = e_gpa * 1e9  # Pa
    k = k_theta_mnm * 1e6  # N*m/rad
    p = load_kn * 1e3  # N
    i = inertia_cm4 * 1e-8  # m^4
    L = length_m
    w = p * x_m ** 2 * (3.0 * L - x_m) / (6.0 * e * i) + p * L * x_m / k
    return w * 1e3  # mm


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    rng = random.Random(SEED)
    for fname, load_kn in EXPERIMENTS:
        rows = ["station,deflection"]
        for x in STATIONS_M:
            for _ in range(REPLICATES):
                y = deflection_mm(x, load_kn) + rng.gauss(0.0, NOISE_SD_MM)
                rows.append("{},{:.4f}".format(x, y))
        with open(os.path.join(here, fname), "w", newline="\n") as f:
            f.write("\n".join(rows) + "\n")


if __name__ == "__main__":
    main()
