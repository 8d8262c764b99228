"""Reference values for assay's principal-component basis and holdout diagnostics.

Writes (to stdout) a JSON fixture with two parts.

1. "basis": for a few matrices of simulated curves (runs x output values), the
   principal-component basis of Higdon, Gattiker, Williams & Rightley (2008,
   JASA 103:570-583): centre every output value by its mean over the runs, divide
   every quantity by one scale (the root mean square of its centred values), and
   take the principal components of the result with scikit-learn's PCA
   (svd_solver="full"), keeping components until their share of the variance
   exceeds variance_kept (scikit-learn's own rule for a fractional n_components).
   Recorded: the centring, the scales, the unit directions (sign fixed so that
   the largest entry is positive), the singular values, the shares of variance,
   and the per-value discarded variance D_j = s_j^2 * mean_i (residual_ij^2)
   computed with numpy.

2. "mahalanobis": for a few GPs at fixed hyperparameters (Matern 5/2, unit
   inputs), held-out points and observed values, the Mahalanobis distance
   D_MD = (y - m)^T (V + g I)^{-1} (y - m) of Bastos & O'Hagan (2009,
   Technometrics 51:425-438), with m, V the predictive mean and covariance and g
   the nugget. For the zero-mean GP, m and V come from scikit-learn's
   GaussianProcessRegressor (optimizer=None, alpha=g, predict(return_cov=True));
   for a GP with a constant trend integrated out, from a direct numpy evaluation
   of Rasmussen & Williams (2006) eqs. 2.41-2.42 (equation numbers from memory).
   The reference distribution m(n-q-2)/(n-q) * F(m, n-q) is summarised with
   scipy.stats.f (mean, variance, 2.5 % and 97.5 % quantiles); the script checks that its mean and variance
   equal m and 2m(m+n-q-2)/(n-q-4). (The scaled-F form is quoted from memory of
   Bastos & O'Hagan; the check is that these moments follow from it.)

How to run (from the repository root):

    python3 -m venv .venv
    .venv/bin/pip install scikit-learn==1.9.1 numpy==2.4.6 scipy==1.17.1
    .venv/bin/python tests/reference/basis_reference.py > tests/reference/basis.json

The committed tests/reference/basis.json was produced with scikit-learn 1.9.1,
numpy 2.4.6, scipy 1.17.1 (Python 3.11); the versions are also recorded inside the
JSON.
"""

import json
import math
import sys

import numpy as np
import scipy
import scipy.stats
import sklearn
from sklearn.decomposition import PCA
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern


def standardise(y, groups):
    mean = y.mean(axis=0)
    c = y - mean
    scale = np.zeros(y.shape[1])
    for g in sorted(set(groups)):
        cols = [j for j in range(y.shape[1]) if groups[j] == g]
        scale[cols] = math.sqrt(np.mean(c[:, cols] ** 2))
    return mean, scale, c / scale


def basis_case(name, y, groups, variance_kept):
    n = y.shape[0]
    mean, scale, z = standardise(y, groups)
    pca = PCA(n_components=variance_kept, svd_solver="full")
    pca.fit(z)
    k = pca.n_components_
    dirs = pca.components_.copy()
    for i in range(k):
        if dirs[i, np.argmax(np.abs(dirs[i]))] < 0:
            dirs[i] = -dirs[i]
    # Independent check of the shares: singular values of z directly.
    s = np.linalg.svd(z, compute_uv=False)
    share = s**2 / np.sum(s**2)
    assert np.allclose(share[:k], pca.explained_variance_ratio_, rtol=1e-12, atol=1e-15)
    resid = z - (z @ dirs.T) @ dirs
    discarded = scale**2 * np.mean(resid**2, axis=0)
    return {
        "name": name,
        "outputs": y.tolist(),
        "groups": list(groups),
        "variance_kept": variance_kept,
        "mean": mean.tolist(),
        "scale": scale.tolist(),
        "n_components": int(k),
        "directions": dirs.tolist(),
        "singular_values": pca.singular_values_.tolist(),
        "explained": pca.explained_variance_ratio_.tolist(),
        "discarded": discarded.tolist(),
        "n_runs": n,
    }


def matern52(xa, xb, signal_var, ls):
    d = (xa[:, None, :] - xb[None, :, :]) / np.asarray(ls)[None, None, :]
    r = np.sqrt(np.sum(d * d, axis=2))
    s5r = math.sqrt(5.0) * r
    return signal_var * (1.0 + s5r + s5r * s5r / 3.0) * np.exp(-s5r)


def reference(m, n, q):
    dof = n - q
    c = m * (dof - 2) / dof
    f = scipy.stats.f(m, dof)
    mean = c * f.mean()
    var = c * c * f.var()
    assert abs(mean - m) < 1e-9 * m
    if dof > 4:
        assert abs(var - 2 * m * (m + dof - 2) / (dof - 4)) < 1e-9 * var
    return {
        "mean": float(mean),
        "variance": float(var) if dof > 4 else None,
        "q025": float(c * f.ppf(0.025)),
        "q975": float(c * f.ppf(0.975)),
    }


def md_zero_mean(name, rng, n, m, d, signal_var, ls, nugget):
    x = rng.uniform(size=(n, d))
    xs = rng.uniform(size=(m, d))
    f = lambda x: np.sin(3 * x[:, 0]) + x[:, -1] ** 2
    y = f(x)
    ys = f(xs)
    kernel = ConstantKernel(signal_var, "fixed") * Matern(ls, "fixed", nu=2.5)
    gp = GaussianProcessRegressor(kernel, alpha=nugget, optimizer=None, normalize_y=False)
    gp.fit(x, y)
    mu, cov = gp.predict(xs, return_cov=True)
    v = cov + nugget * np.eye(m)
    e = ys - mu
    md = float(e @ np.linalg.solve(v, e))
    # Cross-check scikit-learn's covariance with a direct evaluation (R&W eq. 2.26,
    # from memory).
    k = matern52(x, x, signal_var, ls) + nugget * np.eye(n)
    ks = matern52(xs, x, signal_var, ls)
    cov2 = matern52(xs, xs, signal_var, ls) - ks @ np.linalg.solve(k, ks.T)
    assert np.allclose(cov, cov2, atol=1e-9)
    return {
        "name": name,
        "trend": "zero",
        "x": x.tolist(),
        "y": y.tolist(),
        "x_test": xs.tolist(),
        "y_test": ys.tolist(),
        "signal_var": signal_var,
        "length_scales": list(ls),
        "nugget": nugget,
        "mahalanobis": md,
        "reference": reference(m, n, 0),
    }


def md_constant_trend(name, rng, n, m, d, signal_var, ls, nugget):
    x = rng.uniform(size=(n, d))
    xs = rng.uniform(size=(m, d))
    f = lambda x: 2.0 + np.cos(2 * x[:, 0]) * x[:, 1]
    y = f(x)
    ys = f(xs)
    k = matern52(x, x, signal_var, ls) + nugget * np.eye(n)
    ks = matern52(xs, x, signal_var, ls)
    kss = matern52(xs, xs, signal_var, ls)
    h = np.ones((n, 1))
    hs = np.ones((m, 1))
    ki = np.linalg.inv(k)
    a = h.T @ ki @ h
    beta = np.linalg.solve(a, h.T @ ki @ y)
    mu = hs @ beta + ks @ ki @ (y - h @ beta)
    r = hs.T - h.T @ ki @ ks.T
    cov = kss - ks @ ki @ ks.T + r.T @ np.linalg.solve(a, r)
    v = cov + nugget * np.eye(m)
    e = ys - mu
    md = float(e @ np.linalg.solve(v, e))
    return {
        "name": name,
        "trend": "constant",
        "x": x.tolist(),
        "y": y.tolist(),
        "x_test": xs.tolist(),
        "y_test": ys.tolist(),
        "signal_var": signal_var,
        "length_scales": list(ls),
        "nugget": nugget,
        "mahalanobis": md,
        "reference": reference(m, n, 1),
    }


def main():
    rng = np.random.default_rng(20081)
    # Smooth curves: a family a * t / (1 + b t) + c t^2 over 15 stations.
    t = np.linspace(0.1, 1.5, 15)
    p = rng.uniform([1.0, 0.2, -0.3], [2.0, 2.0, 0.3], size=(30, 3))
    curves = p[:, [0]] * t / (1 + p[:, [1]] * t) + p[:, [2]] * t**2
    curves += 1e-4 * rng.standard_normal(curves.shape)
    # Two quantities of very different sizes (force in N and strain), 8 + 6 values.
    q = rng.uniform(size=(20, 2))
    s1 = np.linspace(0, 1, 8)
    s2 = np.linspace(0, 1, 6)
    a = 1e3 * (q[:, [0]] * s1 + q[:, [1]] * s1**2)
    b = 1e-3 * (np.sin(3 * q[:, [0]] + s2) * q[:, [1]])
    two = np.hstack([a, b])
    scalar = rng.normal(5.0, 2.0, size=(10, 1))
    cases = [
        basis_case("smooth curves", curves, [0] * 15, 0.999),
        basis_case("two quantities", two, [0] * 8 + [1] * 6, 0.99),
        basis_case("one value", scalar, [0], 0.999),
    ]
    md = [
        md_zero_mean("zero mean 2-D", rng, 25, 6, 2, 1.3, [0.4, 0.7], 1e-6),
        md_zero_mean("zero mean 3-D noisy", rng, 30, 8, 3, 0.8, [0.5, 0.3, 0.9], 1e-2),
        md_constant_trend("constant trend 2-D", rng, 20, 5, 2, 2.0, [0.5, 0.6], 1e-5),
    ]
    json.dump(
        {
            "generator": "tests/reference/basis_reference.py",
            "versions": {
                "python": sys.version.split()[0],
                "numpy": np.__version__,
                "scipy": scipy.__version__,
                "scikit-learn": sklearn.__version__,
            },
            "basis": cases,
            "mahalanobis": md,
        },
        sys.stdout,
        indent=1,
    )
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
