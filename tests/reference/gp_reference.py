"""Reference values for assay's Gaussian-process code, computed with scikit-learn.

Writes (to stdout) a JSON fixture with, for a few small cases, the log marginal
likelihood of a zero-mean GP with kernel

    k(x, x') = signal_var * Matern_{5/2}(r),   r = sqrt(sum_j ((x_j - x'_j) / l_j)^2)
    Matern_{5/2}(r) = (1 + sqrt(5) r + 5 r^2 / 3) * exp(-sqrt(5) r)

(Rasmussen & Williams, Gaussian Processes for Machine Learning, MIT Press 2006,
eq. 4.17 for the Matern 5/2 form and eq. 2.30 for the log marginal likelihood
log p(y|X) = -1/2 y^T K_y^{-1} y - 1/2 log|K_y| - n/2 log(2 pi),
K_y = K + noise_var * I), its gradient with respect to
theta = [ln signal_var, ln l_1, ..., ln l_d] (eq. 5.9, chain rule for the log
parameters; noise_var is held fixed and has no gradient entry), and the
posterior mean and standard deviation of the latent function (no noise added)
at test points (eqs. 2.25-2.26). The equation numbers are quoted from memory.

How to run (from the repository root):

    python3 -m venv .venv
    .venv/bin/pip install scikit-learn==1.9.1 numpy==2.4.6 scipy==1.17.1
    .venv/bin/python tests/reference/gp_reference.py > tests/reference/gp_lml.json

The committed tests/reference/gp_lml.json was produced with scikit-learn 1.9.1,
numpy 2.4.6, scipy 1.17.1 (Python 3.11). The versions used are also recorded
inside the JSON.

The script also checks scikit-learn's numbers against a direct numpy
evaluation of the formulas above (value, gradient by central differences,
prediction) and stops with an error if they disagree.
"""

import json
import math
import sys

import numpy as np
import scipy
import sklearn
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern

BOUNDS = (1e-8, 1e8)  # not "fixed", so the hyperparameters are in theta and get gradients


def matern52(xa, xb, signal_var, ls):
    d = (xa[:, None, :] - xb[None, :, :]) / np.asarray(ls)[None, None, :]
    r = np.sqrt(np.sum(d * d, axis=2))
    s5r = math.sqrt(5.0) * r
    return signal_var * (1.0 + s5r + s5r * s5r / 3.0) * np.exp(-s5r)


def direct_lml(x, y, signal_var, ls, noise_var):
    n = len(y)
    k = matern52(x, x, signal_var, ls) + noise_var * np.eye(n)
    c = np.linalg.cholesky(k)
    a = np.linalg.solve(c.T, np.linalg.solve(c, y))
    return -0.5 * y @ a - np.sum(np.log(np.diag(c))) - 0.5 * n * math.log(2.0 * math.pi)


def direct_predict(x, y, signal_var, ls, noise_var, xt):
    k = matern52(x, x, signal_var, ls) + noise_var * np.eye(len(y))
    ks = matern52(xt, x, signal_var, ls)
    mean = ks @ np.linalg.solve(k, y)
    var = signal_var - np.sum(ks * np.linalg.solve(k, ks.T).T, axis=1)
    return mean, np.sqrt(np.maximum(var, 0.0))


def make_case(name, description, x, y, signal_var, ls, noise_var, xt):
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    xt = np.asarray(xt, dtype=float)
    d = x.shape[1]
    kernel = ConstantKernel(signal_var, constant_value_bounds=BOUNDS) * Matern(
        length_scale=list(ls), length_scale_bounds=BOUNDS, nu=2.5
    )
    gp = GaussianProcessRegressor(kernel=kernel, alpha=noise_var, optimizer=None, normalize_y=False)
    gp.fit(x, y)
    theta = gp.kernel_.theta
    # theta = log([signal_var, l_1, ..., l_d]) in this order for Constant * Matern.
    assert np.allclose(theta, np.log([signal_var] + list(ls)), rtol=0, atol=1e-14), theta
    lml, grad = gp.log_marginal_likelihood(theta, eval_gradient=True)
    mean, sd = gp.predict(xt, return_std=True)

    # Self-checks against a direct evaluation.
    ref = direct_lml(x, y, signal_var, ls, noise_var)
    assert abs(lml - ref) <= 1e-9 * max(1.0, abs(ref)), (name, lml, ref)
    h = 1e-5
    for j in range(d + 1):
        p = np.log([signal_var] + list(ls))
        pp, pm = p.copy(), p.copy()
        pp[j] += h
        pm[j] -= h
        ep, em = np.exp(pp), np.exp(pm)
        fd = (direct_lml(x, y, ep[0], ep[1:], noise_var) - direct_lml(x, y, em[0], em[1:], noise_var)) / (2 * h)
        assert abs(fd - grad[j]) <= 1e-5 * max(1.0, abs(fd)), (name, j, fd, grad[j])
    m2, s2 = direct_predict(x, y, signal_var, ls, noise_var, xt)
    assert np.allclose(mean, m2, rtol=1e-9, atol=1e-10), (name, mean, m2)
    assert np.allclose(sd, s2, rtol=1e-6, atol=1e-8), (name, sd, s2)

    return {
        "name": name,
        "description": description,
        "x": x.tolist(),
        "y": y.tolist(),
        "signal_var": float(signal_var),
        "length_scales": [float(v) for v in ls],
        "noise_var": float(noise_var),
        "ln_marginal_likelihood": float(lml),
        "grad_order": ["ln_signal_var"] + ["ln_length_scale_%d" % (j + 1) for j in range(d)],
        "grad_ln_params": [float(g) for g in grad],
        "x_test": xt.tolist(),
        "mean": [float(v) for v in mean],
        "sd": [float(v) for v in sd],
    }


def main():
    cases = []

    # (1) 1-D, 8 evenly spaced points on [0, 1], y = sin(3x), no added noise.
    x1 = np.linspace(0.0, 1.0, 8)[:, None]
    y1 = np.sin(3.0 * x1[:, 0])
    xt1 = np.array([[0.05], [0.33], [0.5], [0.9], [1.2]])
    cases.append(make_case("sin3x_1d", "1-D, 8 evenly spaced points on [0,1], y = sin(3 x), no added noise",
                           x1, y1, 1.3, [0.4], 1e-6, xt1))

    # (2) 3-D, 20 points uniform on [0,1]^3 (numpy seed 7), y = x0 + sin(4 x1) + x2^2, no added noise.
    rng = np.random.default_rng(7)
    x2 = rng.uniform(0.0, 1.0, size=(20, 3))
    y2 = x2[:, 0] + np.sin(4.0 * x2[:, 1]) + x2[:, 2] ** 2
    xt2 = rng.uniform(0.0, 1.0, size=(5, 3))
    cases.append(make_case("smooth_3d",
                           "3-D, 20 points uniform on [0,1]^3 from numpy default_rng(7), "
                           "y = x0 + sin(4 x1) + x2^2, no added noise; x_test: next 5 draws of the same generator",
                           x2, y2, 0.8, [1.5, 0.3, 0.7], 1e-4, xt2))

    # (3) 2-D, 12 points uniform on [0,1]^2 (numpy seed 11), y = cos(3 x0) + 2 x1 + N(0, 0.3^2) noise,
    #     larger noise_var = 0.1.
    rng = np.random.default_rng(11)
    x3 = rng.uniform(0.0, 1.0, size=(12, 2))
    y3 = np.cos(3.0 * x3[:, 0]) + 2.0 * x3[:, 1] + rng.normal(0.0, 0.3, size=12)
    xt3 = np.array([[0.1, 0.1], [0.5, 0.5], [0.9, 0.2], [0.25, 0.8]])
    cases.append(make_case("noisy_2d",
                           "2-D, 12 points uniform on [0,1]^2 from numpy default_rng(11), "
                           "y = cos(3 x0) + 2 x1 + normal(0, 0.3) noise drawn after x from the same generator",
                           x3, y3, 2.0, [0.25, 0.9], 0.1, xt3))

    out = {
        "generator": "tests/reference/gp_reference.py",
        "library": "scikit-learn %s" % sklearn.__version__,
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": "%d.%d.%d" % sys.version_info[:3],
        "model": "zero-mean GP, kernel signal_var * Matern(nu=5/2) with one length-scale per dimension "
                 "(sklearn ConstantKernel * Matern), noise_var added to the diagonal (sklearn alpha), "
                 "normalize_y=False, no optimisation",
        "kernel_formula": "signal_var * (1 + sqrt(5) r + 5 r^2 / 3) * exp(-sqrt(5) r), "
                          "r = sqrt(sum_j ((x_j - x'_j) / l_j)^2)",
        "gradient": "d ln p(y|X) / d theta, theta = [ln signal_var, ln l_1, ..., ln l_d]; noise_var fixed",
        "sd": "posterior sd of the latent function (noise_var not added)",
        "cases": cases,
    }
    json.dump(out, sys.stdout, indent=2)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
