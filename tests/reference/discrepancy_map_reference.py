"""Reference joint posterior modes for assay's `hyperparameters: map`, found with SciPy.

Writes (to stdout) a JSON fixture with two small calibration problems with a
Kennedy-O'Hagan model discrepancy (Kennedy & O'Hagan, "Bayesian calibration of
computer models", JRSS B 63(3), 425-464, 2001) and, for each, the maximum of
the joint posterior density of the parameters, the noise variance when it is
unknown, and the discrepancy hyperparameters (sd s, length-scale l).

The model (every measurement its own row; replicates at one x share delta):

    y_i = theta_1 + theta_2 x_i + delta(x_i) + eps_i
    delta ~ GP(0, s^2 rho(|x - x'| / l)),   eps_i ~ N(0, sigma^2)

rho the squared-exponential exp(-r^2/2) or the Matern 5/2
(1 + sqrt(5) r + 5 r^2/3) exp(-sqrt(5) r) correlation (Rasmussen & Williams,
Gaussian Processes for Machine Learning, MIT Press 2006, eqs. 4.9 and 4.17;
equation numbers from memory).
delta is integrated out, so y ~ N(A theta, sigma^2 I + K_delta), and the log
posterior, up to the priors' normalising constants exactly as assay leaves
them out (docs/methods.md section 4), is

    lp = sum_j -(theta_j - m_j)^2 / (2 sd_j^2)            normal priors on theta
       [ - (a + 1) ln sigma^2 - b / sigma^2 ]             inverse-gamma(a, b), unknown noise only
       - s^2 / (2 tau^2)                                   half-normal(tau) on s
       - ln l - (ln l - mu)^2 / (2 w^2)                    lognormal(mu, w) on l
       + ln N(y; A theta, sigma^2 I + K_delta)            dense, every constant kept

on the constrained scale (theta, sigma^2, s, l; no Jacobian). The mode is found
by scipy.optimize.minimize on u = (theta, [ln sigma^2], ln s, ln l) -- a change
of coordinates, which moves no maximum -- with L-BFGS-B (in a wide box) from a
grid of starts, each result polished by unbounded Nelder-Mead (xatol 1e-11,
fatol 1e-14); the best wins, and it must lie inside the box.

Independent check (the script stops with an error if it fails): theta is
profiled out in closed form (for a fixed covariance S the maximising theta is
the linear-Gaussian posterior mean, Bishop, Pattern Recognition and Machine
Learning, 2006, eqs. 2.116-2.117 with L = S^-1, equation numbers from memory);
a brute-force grid over (ln s, ln l) [and ln sigma^2] near the optimum must find
no value above it and its best point must lie within one grid step of it, and a
coarse grid over a wide box (recorded in the fixture) must find no value above it
either.

Also written: the Laplace standard deviations at the mode (square roots of the
diagonal of the inverse Hessian of -lp in u, by central differences), so the
test can state its tolerance in posterior sds.

The data are invented: a straight line (theta = (0.5, 1.5)) plus a bias
0.15 sin(2 pi x) that the line cannot follow, plus fixed pseudo-random
deviations of sd 0.05 (numpy's default_rng(20240607)) at x = i/14,
i = 0..14; stations 7/14 and 11/14 have a second replicate.

How to run (from the repository root):

    python3 -m venv .venv
    .venv/bin/pip install numpy==2.4.6 scipy==1.17.1
    .venv/bin/python tests/reference/discrepancy_map_reference.py > tests/reference/discrepancy_map.json

The committed tests/reference/discrepancy_map.json was produced with numpy
2.4.6 and scipy 1.17.1 (Python 3.11); the versions are recorded inside it.
"""

import json
import math
import sys

import numpy as np
import scipy
from scipy.optimize import minimize

LN_2PI = math.log(2.0 * math.pi)
PRIOR_MEAN = [0.0, 0.0]
PRIOR_SD = [2.0, 3.0]
SD_SCALE = 0.5            # half-normal tau of s
LENGTH_MU = math.log(0.5)  # lognormal mu of l
LENGTH_SIGMA = 1.0         # lognormal sigma of l


def data():
    rng = np.random.default_rng(20240607)
    rows = []
    for i in range(15):
        x = i / 14.0
        for _ in range(2 if i in (7, 11) else 1):
            e = 0.05 * rng.standard_normal()
            y = 0.5 + 1.5 * x + 0.15 * math.sin(2.0 * math.pi * x) + e
            rows.append((x, float(f"{y:.12g}")))
    return rows


def corr(kernel, r):
    if kernel == "squared-exponential":
        return np.exp(-0.5 * r * r)
    if kernel == "matern52":
        s = math.sqrt(5.0) * r
        return (1.0 + s + s * s / 3.0) * np.exp(-s)
    raise ValueError(kernel)


def covariance(case, noise_var, s, l):
    x = np.array([r[0] for r in case["rows"]])
    r = np.abs(x[:, None] - x[None, :]) / l
    return noise_var * np.eye(len(x)) + s * s * corr(case["kernel"], r)


def design(case):
    x = np.array([r[0] for r in case["rows"]])
    return np.column_stack([np.ones_like(x), x]), np.array([r[1] for r in case["rows"]])


def ln_normal(y, mean, cov):
    c = np.linalg.cholesky(cov)
    z = np.linalg.solve(c, y - mean)
    return -0.5 * (len(y) * LN_2PI + 2.0 * np.sum(np.log(np.diag(c))) + z @ z)


def hyper_prior(case, noise_var, s, l):
    lp = -s * s / (2.0 * SD_SCALE**2)
    lp += -math.log(l) - (math.log(l) - LENGTH_MU) ** 2 / (2.0 * LENGTH_SIGMA**2)
    if case["noise"]["kind"] == "unknown":
        a, b = case["noise"]["shape"], case["noise"]["scale"]
        lp += -(a + 1.0) * math.log(noise_var) - b / noise_var
    return lp


def unpack(case, u):
    theta = np.array(u[:2])
    if case["noise"]["kind"] == "unknown":
        noise_var, s, l = math.exp(u[2]), math.exp(u[3]), math.exp(u[4])
    else:
        noise_var, s, l = case["noise"]["sd"] ** 2, math.exp(u[2]), math.exp(u[3])
    return theta, noise_var, s, l


def ln_posterior(case, u):
    theta, noise_var, s, l = unpack(case, u)
    a, y = design(case)
    lp = sum(-((t - m) ** 2) / (2.0 * sd * sd) for t, m, sd in zip(theta, PRIOR_MEAN, PRIOR_SD))
    lp += hyper_prior(case, noise_var, s, l)
    return lp + ln_normal(y, a @ theta, covariance(case, noise_var, s, l))


def profile(case, noise_var, s, l):
    """max over theta of lp at fixed (noise_var, s, l): Bishop eqs. 2.116-2.117 (from memory)."""
    a, y = design(case)
    cov = covariance(case, noise_var, s, l)
    prec = np.linalg.inv(cov)
    lam = np.diag([1.0 / sd**2 for sd in PRIOR_SD])
    post_prec = lam + a.T @ prec @ a
    m = np.linalg.solve(post_prec, a.T @ prec @ y + lam @ np.array(PRIOR_MEAN))
    lp = sum(-((t - mu) ** 2) / (2.0 * sd * sd) for t, mu, sd in zip(m, PRIOR_MEAN, PRIOR_SD))
    return lp + hyper_prior(case, noise_var, s, l) + ln_normal(y, a @ m, cov)


def optimise(case):
    unknown = case["noise"]["kind"] == "unknown"
    def f(u):
        try:
            return -ln_posterior(case, u)
        except np.linalg.LinAlgError:
            return 1e10  # far from the mode: a covariance that cannot be factored
    bounds = [(-20.0, 20.0)] * 2 + ([(math.log(1e-8), 0.0)] if unknown else []) + [
        (math.log(1e-4), math.log(10.0)), (math.log(1e-3), math.log(100.0))]
    starts = []
    for ls in (math.log(0.02), math.log(0.1), math.log(0.5)):
        for ll in (math.log(0.05), math.log(0.2), math.log(1.0)):
            for t in ([0.0, 0.0], [1.0, 1.0]):
                u = list(t) + ([math.log(0.05**2)] if unknown else []) + [ls, ll]
                starts.append(u)
    best = None
    for u0 in starts:
        r = minimize(f, u0, method="L-BFGS-B", bounds=bounds)
        r = minimize(f, r.x, method="Nelder-Mead",
                     options={"xatol": 1e-11, "fatol": 1e-14, "maxiter": 200000, "maxfev": 200000})
        if best is None or r.fun < best.fun:
            best = r
    return best


def hessian(case, u, h=1e-4):
    n = len(u)
    f = lambda v: -ln_posterior(case, v)
    hm = np.zeros((n, n))
    for i in range(n):
        for j in range(n):
            def at(di, dj):
                v = np.array(u, dtype=float)
                v[i] += di
                v[j] += dj
                return f(v)
            hm[i, j] = (at(h, h) - at(h, -h) - at(-h, h) + at(-h, -h)) / (4.0 * h * h)
    return hm


def grid_check(case, u, lp_best):
    unknown = case["noise"]["kind"] == "unknown"
    _, noise_var, s, l = unpack(case, u)
    n = 81 if not unknown else 31
    half = 2.0 if not unknown else 1.0
    g_s = np.linspace(math.log(s) - half, math.log(s) + half, n)
    g_l = np.linspace(math.log(l) - half, math.log(l) + half, n)
    g_v = np.linspace(math.log(noise_var) - half, math.log(noise_var) + half, n) if unknown else [math.log(noise_var)]
    top, arg = -math.inf, None
    for lv in g_v:
        for ls in g_s:
            for ll in g_l:
                v = profile(case, math.exp(lv), math.exp(ls), math.exp(ll))
                if v > top:
                    top, arg = v, (lv, ls, ll)
    step = 2.0 * half / (n - 1)
    if top > lp_best + 1e-9:
        sys.exit(f"{case['name']}: the grid found {top} above the optimum {lp_best}")
    for a, b in zip(arg, (math.log(noise_var), math.log(s), math.log(l))):
        if abs(a - b) > step + 1e-12:
            sys.exit(f"{case['name']}: the grid's best point {arg} is far from the optimum")
    # A coarse grid over a wide box: no higher mode elsewhere.
    wide_s = np.linspace(math.log(1e-3), math.log(3.0), 61)
    wide_l = np.linspace(math.log(5e-3), math.log(20.0), 61)
    wide_v = np.linspace(math.log(1e-4), math.log(1e-2), 21) if unknown else [math.log(noise_var)]
    wide_top = max(profile(case, math.exp(lv), math.exp(ls), math.exp(ll))
                   for lv in wide_v for ls in wide_s for ll in wide_l)
    if wide_top > lp_best + 1e-9:
        sys.exit(f"{case['name']}: the wide grid found {wide_top} above the optimum {lp_best}")
    # The profile at the optimum equals the optimum (theta there is the profile's).
    if abs(profile(case, noise_var, s, l) - lp_best) > 1e-8:
        sys.exit(f"{case['name']}: the profile disagrees with the optimum")
    return {"local_points": int(len(g_v) * n * n), "local_half_width_ln": half, "local_best": top,
            "wide_points": int(len(wide_v) * 61 * 61),
            "wide_box": "s in [1e-3, 3], l in [5e-3, 20]" + (", noise_var in [1e-4, 1e-2]" if unknown else ""),
            "wide_best": wide_top}


def main():
    rows = data()
    cases = [
        {"name": "squared-exponential, known noise", "kernel": "squared-exponential",
         "noise": {"kind": "known", "sd": 0.05}, "rows": rows},
        {"name": "matern52, unknown noise", "kernel": "matern52",
         "noise": {"kind": "unknown", "shape": 3.0, "scale": 0.01}, "rows": rows},
    ]
    out = []
    for case in cases:
        r = optimise(case)
        u = [float(v) for v in r.x]
        if not (math.log(1e-4) + 1 < u[-2] < math.log(10.0) - 1 and math.log(1e-3) + 1 < u[-1] < math.log(100.0) - 1):
            sys.exit(f"{case['name']}: the mode {u} is at the edge of the search box")
        lp = float(ln_posterior(case, u))
        theta, noise_var, s, l = unpack(case, u)
        hm = hessian(case, u)
        laplace_sd = [float(v) for v in np.sqrt(np.diag(np.linalg.inv(hm)))]
        if not np.all(np.linalg.eigvalsh(hm) > 0):
            sys.exit(f"{case['name']}: the Hessian at the optimum is not positive definite")
        grid = grid_check(case, u, lp)
        out.append({
            "name": case["name"],
            "kernel": case["kernel"],
            "noise": case["noise"],
            "x": [r[0] for r in rows],
            "y": [r[1] for r in rows],
            "mode": {
                "theta": [float(t) for t in theta],
                "noise_var": float(noise_var),
                "sd": float(s),
                "length_scale": float(l),
                "ln_posterior": lp,
            },
            "u_order": "theta_1, theta_2, [ln noise_var], ln sd, ln length_scale",
            "laplace_sd_u": laplace_sd,
            "grid_check": grid,
        })
    json.dump({
        "generator": "tests/reference/discrepancy_map_reference.py",
        "library": f"scipy {scipy.__version__}",
        "numpy": np.__version__,
        "python": sys.version.split()[0],
        "data": "invented: 0.5 + 1.5 x + 0.15 sin(2 pi x) + N(0, 0.05^2) deviations from numpy default_rng(20240607), 12 significant digits",
        "priors": {"theta_mean": PRIOR_MEAN, "theta_sd": PRIOR_SD, "sd_half_normal_scale": SD_SCALE,
                   "length_scale_lognormal_mu": LENGTH_MU, "length_scale_lognormal_sigma": LENGTH_SIGMA},
        "ln_posterior": "priors without their normalising constants (as assay's log_posterior), dense normal likelihood with every constant",
        "cases": out,
    }, sys.stdout, indent=2)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
