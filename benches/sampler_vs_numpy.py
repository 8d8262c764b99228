"""assay's MCMC against a plain numpy random-walk Metropolis on the same log posterior.

For a campaign that `assay all` has finished, this script

1. rebuilds the fitted surrogate from `surrogate.yaml` (per experiment: the principal-
   component basis, one Gaussian process per component weight with its recorded
   hyperparameters, nugget and jitter, the trend integrated out) and reads the study's
   field data, priors and known noise sds;
2. evaluates the same log posterior as assay (priors truncated to the ranges without
   their normalising constants; the Gaussian likelihood with replicates reduced to
   their sufficient statistics and the surrogate's low-rank-plus-diagonal covariance by
   the Woodbury identity) and prints its largest difference from the `log_posterior`
   column of `posterior-samples.csv` at a few of assay's draws;
3. runs a random-walk Metropolis in numpy on z = logit θ (Jacobian included), with the
   proposal covariance (2.38²/d) × the posterior covariance of z estimated from assay's
   own draws -- a tuned proposal given for free, so the comparison is of the cost per
   evaluation and not of the tuning;
4. prints log-posterior evaluations per second and bulk ESS per second (arviz
   `ess(method="bulk")`, smallest over the parameters) for numpy, to set beside assay's
   figures from `posterior.yaml` (`n_evaluations`, `diagnostics`, the provenance's
   elapsed time of the whole calibrate stage, and `sampling_s`, the sampling alone: the
   part numpy's timed loop matches).

Only known noise (`noise: {sd: v}` or an sd column) and studies without
`calibration.discrepancy` or `prior_from` are handled: the bundled cantilever and
tensile-bar studies.

How to run (from the repository root; versions used for docs/performance.md: Python
3.11.7, numpy 2.4.6, scipy 1.17.1, arviz 0.23.4, PyYAML 6):

    make build
    target/release/assay --runs RUNS all models/cantilever/study.yaml
    RAYON_NUM_THREADS=1 target/release/assay --runs RUNS calibrate models/cantilever/study.yaml
    python benches/sampler_vs_numpy.py models/cantilever/study.yaml RUNS/cantilever [N_ITER [N_SEEDS]]
"""

import csv
import math
import sys
import time
import warnings

import numpy as np
import yaml
from scipy.linalg import cho_solve, solve_triangular

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import arviz as az

LN_2PI = math.log(2.0 * math.pi)


def corr(kernel, r):
    if kernel == "matern52":
        s = math.sqrt(5.0) * r
        return (1.0 + s + s * s / 3.0) * np.exp(-s)
    if kernel == "matern32":
        s = math.sqrt(3.0) * r
        return (1.0 + s) * np.exp(-s)
    if kernel == "squared-exponential":
        return np.exp(-0.5 * r * r)
    raise ValueError(kernel)


def trend_rows(mean, u):
    """H for unit-box inputs u (n x d): constant [1] or linear [1, u]."""
    ones = np.ones((u.shape[0], 1))
    if mean == "constant":
        return ones
    if mean == "linear":
        return np.hstack([ones, u])
    raise ValueError(mean)


class ComponentGp:
    """A GP at fixed hyperparameters with the trend's coefficients integrated out
    (Rasmussen & Williams 2006, eqs. 2.41-2.42; equation numbers from memory)."""

    def __init__(self, kernel, mean, x, y, ln_internal, jitter):
        self.kernel, self.mean, self.x = kernel, mean, x
        self.s2 = math.exp(ln_internal[0])
        self.inv_l = np.exp(-np.asarray(ln_internal[1:-1]))
        eta = math.exp(ln_internal[-1])
        k = self.cov(x, x) + (self.s2 * eta + jitter) * np.eye(len(y))
        self.l = np.linalg.cholesky(k)
        # Solves through the Cholesky factor, as assay does (an explicit inverse of this
        # ill-conditioned K loses digits).
        h = trend_rows(mean, x)
        k_inv_y = cho_solve((self.l, True), y)
        self.k_inv_h = cho_solve((self.l, True), h)
        self.a_inv = np.linalg.inv(h.T @ self.k_inv_h)
        self.beta = self.a_inv @ (h.T @ k_inv_y)
        self.alpha = k_inv_y - self.k_inv_h @ self.beta

    def cov(self, a, b):
        d = (a[:, None, :] - b[None, :, :]) * self.inv_l
        return self.s2 * corr(self.kernel, np.sqrt((d * d).sum(axis=2)))

    def predict(self, u):
        """Mean and variance at one unit-box point u (d,)."""
        k = self.cov(u[None, :], self.x)[0]
        h = trend_rows(self.mean, u[None, :])[0]
        v = solve_triangular(self.l, k, lower=True)
        r = h - self.k_inv_h.T @ k
        var = self.s2 - v @ v + r @ self.a_inv @ r
        return h @ self.beta + k @ self.alpha, max(var, 0.0)


class ExperimentModel:
    def __init__(self, body, e):
        self.lo, self.hi = np.asarray(e["lower"]), np.asarray(e["upper"])
        names = [o["name"] for o in e["outputs"]]
        self.mean = np.array([o["y_mean"] for o in e["outputs"]])
        scales = e["basis"]["scales"]
        self.scale = np.array([scales[n.split("@")[0]] for n in names])
        self.phi = np.array(e["basis"]["vectors"]).T  # p x K
        self.discarded = np.array(e["basis"]["discarded_by_value"])
        self.b_out = self.phi * self.scale[:, None]
        x = (np.asarray(e["training"]["inputs"]) - self.lo) / (self.hi - self.lo)
        outs = np.asarray(e["training"]["outputs"])
        z = np.where(self.scale > 0, (outs - self.mean) / np.where(self.scale > 0, self.scale, 1), 0.0)
        w = (z @ self.phi) / (self.phi * self.phi).sum(axis=0)
        self.gps = [
            ComponentGp(
                body["kernel"], body["mean"], x, w[:, c],
                c_wire["hyperparameters"]["ln_internal"], c_wire["hyperparameters"]["jitter"],
            )
            for c, c_wire in enumerate(e["components"])
        ]

    def predict(self, theta):
        u = (theta - self.lo) / (self.hi - self.lo)
        mv = [gp.predict(u) for gp in self.gps]
        w = np.array([m for m, _ in mv])
        v = np.array([v for _, v in mv])
        return self.mean + self.scale * (self.phi @ w), v


def ln_normal_low_rank(r, lam, b, v):
    """ln N(r; 0, diag(lam) + B diag(v) B^T) by Woodbury and the determinant lemma."""
    ln_det = np.log(lam).sum()
    quad = (r * r / lam).sum()
    if b.shape[1] > 0:
        g = b * np.sqrt(np.maximum(v, 0.0))
        gl = g / lam[:, None]
        m = np.eye(b.shape[1]) + g.T @ gl
        c = gl.T @ r
        lm = np.linalg.cholesky(m)
        sol = np.linalg.solve(m, c)
        quad -= c @ sol
        ln_det += 2.0 * np.log(np.diag(lm)).sum()
    return -0.5 * (len(r) * LN_2PI + ln_det + quad)


def read_targets(path, x_col, y_cols, noise):
    rows = list(csv.DictReader(open(path)))
    stations = []
    for r in rows:
        x = float(r[x_col]) if x_col else None
        if x not in stations:
            stations.append(x)
    groups = []
    for q in y_cols:
        for s in stations:
            reps = [r for r in rows if (float(r[x_col]) if x_col else None) == s]
            ys = np.array([float(r[q]) for r in reps])
            if "sd" in noise:
                sds = np.full(len(ys), float(noise["sd"]))
            elif "sd_column" in noise:
                sds = np.array([float(r[noise["sd_column"]]) for r in reps])
            else:
                raise SystemExit("only known noise is handled")
            w = 1.0 / sds**2
            ybar = (w * ys).sum() / w.sum()
            v = 1.0 / w.sum()
            c = (-(len(ys) - 1) / 2.0 * LN_2PI - np.log(sds).sum() + 0.5 * math.log(v)
                 - 0.5 * (w * (ys - ybar) ** 2).sum())
            groups.append((ybar, v, c))
    return np.array([g[0] for g in groups]), np.array([g[1] for g in groups]), sum(g[2] for g in groups)


class Posterior:
    def __init__(self, study_path, campaign):
        study = yaml.safe_load(open(study_path))
        base = study_path.rsplit("/", 1)[0] if "/" in study_path else "."
        body = yaml.safe_load(open(f"{campaign}/surrogate.yaml"))  # the envelope is flat
        self.params = study["parameters"]
        self.lo = np.array([p["range"][0] for p in self.params], dtype=float)
        self.hi = np.array([p["range"][1] for p in self.params], dtype=float)
        out = study["simulator"]["output"]
        self.experiments = []
        for e in study["experiments"]:
            wire = next(w for w in body["experiments"] if w["name"] == e["name"])
            ybar, v, c = read_targets(f"{base}/{e['data']}", out.get("x"), out["y"], e["noise"])
            self.experiments.append((ExperimentModel(body, wire), ybar, v, c))
        self.n_eval = 0

    def ln_prior(self, th):
        lp = 0.0
        for p, x, lo, hi in zip(self.params, th, self.lo, self.hi):
            if not (lo <= x <= hi):
                return -math.inf
            pr = p.get("prior", "uniform")
            if isinstance(pr, dict) and "normal" in pr:
                lp += -0.5 * ((x - pr["normal"]["mean"]) / pr["normal"]["sd"]) ** 2
            elif isinstance(pr, dict) and "lognormal" in pr:
                mu, s = pr["lognormal"]["mu"], pr["lognormal"]["sigma"]
                lp += -math.log(x) - 0.5 * ((math.log(x) - mu) / s) ** 2
        return lp

    def ln_posterior(self, th):
        self.n_eval += 1
        lp = self.ln_prior(th)
        if not math.isfinite(lp):
            return lp
        for model, ybar, v, c in self.experiments:
            mu, wv = model.predict(th)
            lp += c + ln_normal_low_rank(ybar - mu, model.discarded + v, model.b_out, wv)
        return lp

    def to_theta(self, z):
        return self.lo + (self.hi - self.lo) / (1.0 + np.exp(-z))

    def to_z(self, th):
        u = np.clip((th - self.lo) / (self.hi - self.lo), 1e-12, 1 - 1e-12)
        return np.log(u / (1 - u))

    def ln_density(self, z):
        ln_jac = (np.log(self.hi - self.lo) - np.abs(z) - 2.0 * np.log1p(np.exp(-np.abs(z)))).sum()
        return self.ln_posterior(self.to_theta(z)) + ln_jac


def main():
    study_path, campaign = sys.argv[1], sys.argv[2]
    n_iter = int(sys.argv[3]) if len(sys.argv) > 3 else 20000
    n_rep = int(sys.argv[4]) if len(sys.argv) > 4 else 1
    post = Posterior(study_path, campaign)
    names = [p["name"] for p in post.params]
    rows = list(csv.DictReader(open(f"{campaign}/posterior-samples.csv")))
    draws = np.array([[float(r[n]) for n in names] for r in rows])
    lp_assay = np.array([float(r["log_posterior"]) for r in rows])
    pick = np.linspace(0, len(rows) - 1, 20).astype(int)
    diff = max(abs(post.ln_posterior(draws[i]) - lp_assay[i]) for i in pick)
    print(f"max |numpy - assay| log posterior over {len(pick)} draws: {diff:.3e}")

    rec = yaml.safe_load(open(f"{campaign}/posterior.yaml"))
    b = rec
    elapsed = rec["provenance"]["elapsed_s"]
    # Sampling alone (what numpy's timed loop covers); records made before the key
    # existed have only the whole stage.
    sampling = rec.get("sampling_s") or elapsed
    ess_assay = min(b["diagnostics"][n]["ess_bulk"] for n in names)
    print(f"assay: {b['n_evaluations']} evaluations in {elapsed:.3f} s: "
          f"{b['n_evaluations'] / elapsed:.0f} evaluations/s; min bulk ESS {ess_assay:.0f}: "
          f"{ess_assay / elapsed:.1f} ESS/s (whole calibrate stage); sampling alone "
          f"{sampling:.3f} s: {ess_assay / sampling:.1f} ESS/s")

    zs = np.array([post.to_z(d) for d in draws])
    d = len(names)
    chol = np.linalg.cholesky((2.38**2 / d) * np.cov(zs.T) + 1e-12 * np.eye(d))
    n_chains = 4
    warm = n_iter // 4
    # The ESS of a random-walk chain on a curved posterior varies a lot from one seed to
    # the next: with several repetitions the median is the figure to quote.
    ess_rates, eval_rates = [], []
    for seed in range(1, n_rep + 1):
        rng = np.random.default_rng(seed)
        out = np.empty((n_chains, n_iter, d))
        post.n_eval = 0
        t0 = time.perf_counter()
        for c in range(n_chains):
            z = zs[rng.integers(len(zs))]
            lp = post.ln_density(z)
            for t in range(warm + n_iter):
                prop = z + chol @ rng.standard_normal(d)
                lp_new = post.ln_density(prop)
                if math.log(rng.random()) < lp_new - lp:
                    z, lp = prop, lp_new
                if t >= warm:
                    out[c, t - warm] = post.to_theta(z)
        elapsed_np = time.perf_counter() - t0
        ess_np = min(float(az.ess(out[:, :, j], method="bulk")) for j in range(d))
        print(f"numpy (seed {seed}): {post.n_eval} evaluations in {elapsed_np:.3f} s: "
              f"{post.n_eval / elapsed_np:.0f} evaluations/s; min bulk ESS {ess_np:.0f}: "
              f"{ess_np / elapsed_np:.1f} ESS/s")
        ess_rates.append(ess_np / elapsed_np)
        eval_rates.append(post.n_eval / elapsed_np)
    ess_med, eval_med = float(np.median(ess_rates)), float(np.median(eval_rates))
    print(f"ratio assay/numpy (numpy's median over {n_rep} seeds): evaluations/s "
          f"{b['n_evaluations'] / elapsed / eval_med:.1f}x, ESS/s {(ess_assay / elapsed) / ess_med:.1f}x "
          f"(range {(ess_assay / elapsed) / max(ess_rates):.1f}x to {(ess_assay / elapsed) / min(ess_rates):.1f}x); "
          f"ESS per second of sampling alone {(ess_assay / sampling) / ess_med:.1f}x")


if __name__ == "__main__":
    main()
