"""Reference values for assay's designs of experiments, computed with scipy.

Writes two JSON fixtures next to this script:

* sobol.json: the first 1,024 points of the unscrambled Sobol' sequence in 10
  dimensions, `scipy.stats.qmc.Sobol(10, scramble=False).random(1024)`. scipy skips
  nothing: its first point is the origin. Every coordinate is k / 2^30 (scipy's
  default 30 bits), so the fixture stores the integers k (`numerators`) and
  `denominator` = 2^30; the script checks that this reproduces scipy's floats
  exactly.
* discrepancy.json: the squared centered L2 discrepancy CD^2 of a few fixed point
  sets, `scipy.stats.qmc.discrepancy(x, method="CD")` (scipy returns the square),
  with the points. Formula (Hickernell 1998, eq. for the centered L2 discrepancy):

      CD^2 = (13/12)^d
             - 2/n   sum_i prod_k (1 + |x_ik - 1/2|/2 - |x_ik - 1/2|^2/2)
             + 1/n^2 sum_i sum_j prod_k (1 + |x_ik - 1/2|/2 + |x_jk - 1/2|/2
                                           - |x_ik - x_jk|/2)

  F. J. Hickernell (1998). A generalized discrepancy and quadrature error bound.
  Mathematics of Computation 67(221), 299-322.

  The script checks scipy's value against a direct numpy evaluation of the formula.

How to run (from the repository root):

    python3 -m venv .venv
    .venv/bin/pip install scipy==1.17.1 numpy==2.4.6
    .venv/bin/python tests/reference/design_reference.py

The committed fixtures were produced with scipy 1.17.1 and numpy 2.4.6
(Python 3.11); the versions are also recorded inside each JSON file.
"""

import json
import os
import sys

import numpy as np
import scipy
from scipy.stats import qmc

HERE = os.path.dirname(os.path.abspath(__file__))


def cd2_direct(x):
    n, d = x.shape
    c = np.abs(x - 0.5)
    t1 = (13.0 / 12.0) ** d
    t2 = np.sum(np.prod(1.0 + 0.5 * c - 0.5 * c * c, axis=1)) * 2.0 / n
    pair = 1.0 + 0.5 * c[:, None, :] + 0.5 * c[None, :, :] - 0.5 * np.abs(x[:, None, :] - x[None, :, :])
    t3 = np.sum(np.prod(pair, axis=2)) / (n * n)
    return t1 - t2 + t3


def versions():
    return {"scipy": scipy.__version__, "numpy": np.__version__, "python": sys.version.split()[0]}


def sobol_fixture():
    dims, n, bits = 10, 1024, 30
    x = qmc.Sobol(dims, scramble=False).random(n)
    k = np.rint(x * 2.0**bits).astype(np.int64)
    assert np.array_equal(k.astype(np.float64) / 2.0**bits, x), "not multiples of 2^-30"
    assert np.all(x[0] == 0.0), "scipy's first unscrambled point is expected to be 0"
    return {
        "source": "scipy.stats.qmc.Sobol(10, scramble=False).random(1024); x = numerators / denominator",
        "versions": versions(),
        "dims": dims,
        "n": n,
        "denominator": 2**bits,
        "numerators": k.tolist(),
    }


def discrepancy_fixture():
    rng = np.random.default_rng(20080101)
    sets = {
        "hand-5x2": np.array([[0.1, 0.2], [0.3, 0.9], [0.5, 0.5], [0.7, 0.05], [0.95, 0.6]]),
        "one-point-3d": np.array([[0.25, 0.5, 0.75]]),
        "uniform-20x3": rng.random((20, 3)),
        "lhs-50x5": qmc.LatinHypercube(5, rng=rng).random(50),
        "sobol-scrambled-64x4": qmc.Sobol(4, rng=rng).random(64),
        "uniform-200x8": rng.random((200, 8)),
        "corners-4x2": np.array([[0.0, 0.0], [0.0, 1.0], [1.0, 0.0], [1.0, 1.0]]),
    }
    cases = []
    for name, x in sets.items():
        v = float(qmc.discrepancy(x, method="CD"))
        direct = cd2_direct(x)
        assert abs(v - direct) <= 1e-12 * max(1.0, abs(direct)), (name, v, direct)
        cases.append({"name": name, "points": x.tolist(), "cd2": v})
    return {
        "source": 'scipy.stats.qmc.discrepancy(x, method="CD") (squared centered L2 discrepancy)',
        "versions": versions(),
        "cases": cases,
    }


def write(name, obj):
    path = os.path.join(HERE, name)
    with open(path, "w", encoding="utf-8") as f:
        json.dump(obj, f, separators=(",", ":"))
        f.write("\n")
    print(f"wrote {path}", file=sys.stderr)


if __name__ == "__main__":
    write("sobol.json", sobol_fixture())
    write("discrepancy.json", discrepancy_fixture())
