"""Reference values for assay's MCMC convergence diagnostics, computed with ArviZ.

Writes (to stdout) a JSON fixture with a few small sets of chains and, for
each, three diagnostics from Vehtari, Gelman, Simpson, Carpenter & Buerkner,
"Rank-normalization, folding, and localization: An improved R-hat for
assessing convergence of MCMC", Bayesian Analysis 16(2), 667-718 (2021):

* rhat     - rank-normalized split-Rhat: the larger of the bulk value (split
             chains, rank-normalized) and the folded value (|x - median|,
             then rank-normalized); arviz.rhat(draws, method="rank")
* ess_bulk - bulk effective sample size (split chains, rank-normalized,
             Geyer's initial monotone sequence); arviz.ess(draws, method="bulk")
* ess_tail - tail effective sample size, the smaller of the ESS of the
             indicators I(x <= q_0.05) and I(x <= q_0.95);
             arviz.ess(draws, method="tail")
* mcse_quantile - Monte Carlo standard error of the 2.5 %, 50 % and 97.5 %
             quantiles (the paper's section 4.3, from memory): the ESS N of the
             indicator I(x <= q_p) over split chains, the Beta(N p + 1, N (1 - p) + 1)
             quantiles a, b at 0.1586553 and 0.8413447, then half the distance
             between the sorted draws at floor(max(a S - 1, 0)) and
             ceil(min(b S - 1, S - 1)); arviz.mcse(draws, method="quantile", prob=p)

`draws` is a numpy array of shape (chain, draw), which these ArviZ functions
take directly as one scalar variable.

Draws are rounded to 12 significant digits before anything is computed, and
the diagnostics are computed from the rounded values, so the JSON holds exactly
the numbers the diagnostics were computed from (each is written in Python's
shortest round-trip form and parses back to the same double).

Implementation details of ArviZ that a port must follow to match to ~1e-12:
ranks are average ranks over all split draws pooled, mapped to normal scores
with Blom's offset, z = Phi^-1((r - 3/8) / (S + 1/4)); chains of odd length drop
the middle draw when split; autocovariances use the biased 1/n estimator;
tau is floored at 1 / log10(S) (S = total draws); the tail quantiles are R's
type 7.

How to run (from the repository root):

    python3 -m venv .venv
    .venv/bin/pip install arviz==0.23.4 numpy==2.4.6 scipy==1.17.1
    .venv/bin/python tests/reference/diagnostics_reference.py > tests/reference/diagnostics.json

(ArviZ 1.x, which pip picks on newer Python versions, reorganised its API;
pin 0.23.4 to reproduce the committed file.)

The committed tests/reference/diagnostics.json was produced with arviz 0.23.4,
numpy 2.4.6, scipy 1.17.1 (Python 3.11.7). The versions used are also recorded
inside the JSON.

The script also checks ArviZ's numbers against a direct numpy/scipy evaluation
of the paper's formulas and stops with an error if they disagree.
"""

import json
import platform
import sys
import warnings

import numpy as np
import scipy
from scipy import stats

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # ArviZ prints a FutureWarning about its refactor on import
    import arviz as az

SIG_DIGITS = 12


def round_sig(a):
    """Round every value to SIG_DIGITS significant digits."""
    return np.array([[float(f"{v:.{SIG_DIGITS}g}") for v in row] for row in a], dtype=float)


def ar1(rng, n_chains, n_draws, phi):
    """x_0 ~ N(0, 1/(1-phi^2)) (stationary), x_t = phi x_{t-1} + e_t, e_t ~ N(0,1)."""
    out = np.empty((n_chains, n_draws))
    out[:, 0] = rng.standard_normal(n_chains) / np.sqrt(1.0 - phi * phi)
    for t in range(1, n_draws):
        out[:, t] = phi * out[:, t - 1] + rng.standard_normal(n_chains)
    return out


def make_cases():
    cases = []

    rng = np.random.default_rng(101)
    cases.append(
        (
            "iid_normal",
            "4 chains x 500 draws, iid N(0,1); numpy default_rng(101).standard_normal((4, 500))",
            rng.standard_normal((4, 500)),
        )
    )

    rng = np.random.default_rng(102)
    cases.append(
        (
            "ar1_phi09",
            "4 chains x 500 draws, AR(1) x_t = 0.9 x_{t-1} + e_t, e_t ~ N(0,1), "
            "x_0 ~ N(0, 1/(1-0.9^2)) (stationary start); numpy default_rng(102), "
            "x_0 = standard_normal(4)/sqrt(1-0.81), then one standard_normal(4) per step",
            ar1(rng, 4, 500, 0.9),
        )
    )

    rng = np.random.default_rng(103)
    x = rng.standard_normal((4, 300))
    x[3] += 1.5
    cases.append(
        (
            "shifted_chain",
            "4 chains x 300 draws, iid N(0,1) but chain index 3 (the fourth) shifted by +1.5: "
            "not converged; numpy default_rng(103).standard_normal((4, 300)), then x[3] += 1.5",
            x,
        )
    )

    rng = np.random.default_rng(104)
    cases.append(
        (
            "exp_ar1_phi05",
            "2 chains x 1000 draws, exp(y) with y an AR(1) y_t = 0.5 y_{t-1} + e_t, e_t ~ N(0,1), "
            "y_0 ~ N(0, 1/(1-0.5^2)) (stationary start): right-skewed; numpy default_rng(104), "
            "y_0 = standard_normal(2)/sqrt(1-0.25), then one standard_normal(2) per step",
            np.exp(ar1(rng, 2, 1000, 0.5)),
        )
    )

    rng = np.random.default_rng(105)
    cases.append(
        (
            "student_t3",
            "3 chains x 200 draws, iid Student t with 3 degrees of freedom (heavy tails); "
            "numpy default_rng(105).standard_t(3, size=(3, 200))",
            rng.standard_t(3, size=(3, 200)),
        )
    )
    return cases


# ---------------------------------------------------------------------------
# Direct evaluation of the paper's formulas, used only as a cross-check.


def split(x):
    half = x.shape[1] // 2
    return np.concatenate([x[:, :half], x[:, x.shape[1] - half :]], axis=0)


def z_scale(x):
    r = stats.rankdata(x, method="average").reshape(x.shape)
    s = x.size
    return stats.norm.ppf((r - 0.375) / (s + 0.25))


def basic_rhat(x):
    m, n = x.shape
    means = x.mean(axis=1)
    b = n * means.var(ddof=1)
    w = x.var(axis=1, ddof=1).mean()
    return np.sqrt(((n - 1) / n * w + b / n) / w)


def direct_rhat(x):
    s = split(x)
    bulk = basic_rhat(z_scale(s))
    tail = basic_rhat(z_scale(np.abs(s - np.median(s))))
    return max(bulk, tail)


def direct_ess(x):
    """ESS of a (chain, draw) array (paper eqs. 10-11, from memory, with Geyer's initial
    monotone sequence)."""
    m, n = x.shape
    if np.ptp(x) < np.finfo(float).resolution:
        return float(x.size)
    xc = x - x.mean(axis=1, keepdims=True)
    acov = np.array([[np.dot(c[: n - t], c[t:]) / n for t in range(n)] for c in xc])
    mean_var = acov[:, 0].mean() * n / (n - 1)
    var_plus = mean_var * (n - 1) / n + (x.mean(axis=1).var(ddof=1) if m > 1 else 0.0)
    rho = 1.0 - (mean_var - acov.mean(axis=0)) / var_plus
    rho[0] = 1.0
    # Geyer's initial positive sequence over pairs (rho_{2k}, rho_{2k+1})
    keep = np.zeros(n)
    keep[0], keep[1] = rho[0], rho[1]
    ev, od = rho[0], rho[1]
    t = 1
    while t < n - 3 and ev + od > 0.0:
        ev, od = rho[t + 1], rho[t + 2]
        if ev + od >= 0:
            keep[t + 1], keep[t + 2] = ev, od
        t += 2
    max_t = t - 2
    if ev > 0:
        keep[max_t + 1] = ev
    # initial monotone sequence
    t = 1
    while t <= max_t - 2:
        if keep[t + 1] + keep[t + 2] > keep[t - 1] + keep[t]:
            keep[t + 1] = keep[t + 2] = (keep[t - 1] + keep[t]) / 2.0
        t += 2
    tau = -1.0 + 2.0 * keep[: max_t + 1].sum() + keep[max_t + 1 : max_t + 2].sum()
    tau = max(tau, 1.0 / np.log10(m * n))
    return m * n / tau


def type7_quantile(x, p):
    v = np.sort(x.ravel())
    h = (v.size - 1) * p
    lo = int(np.floor(h))
    hi = min(lo + 1, v.size - 1)
    return v[lo] + (h - lo) * (v[hi] - v[lo])


def direct_ess_bulk(x):
    return direct_ess(z_scale(split(x)))


def direct_ess_tail(x):
    return min(
        direct_ess(split((x <= type7_quantile(x, p)).astype(float))) for p in (0.05, 0.95)
    )


def direct_mcse_quantile(x, p):
    ind = (x <= type7_quantile(x, p)).astype(float)
    n_eff = direct_ess(split(ind))
    a, b = stats.beta.ppf([0.1586553, 0.8413447], n_eff * p + 1, n_eff * (1 - p) + 1)
    v = np.sort(x.ravel())
    s = v.size
    return (v[int(np.ceil(min(b * s - 1, s - 1)))] - v[int(np.floor(max(a * s - 1, 0)))]) / 2


QUANTILE_PROBS = (0.025, 0.5, 0.975)


def check(name, what, got, want, rtol=1e-9):
    if not np.isfinite(got) or abs(got - want) > rtol * max(1.0, abs(want)):
        sys.exit(f"{name}: arviz {what} = {got!r} but direct evaluation gives {want!r}")


# ---------------------------------------------------------------------------


def main():
    out_cases = []
    for name, description, raw in make_cases():
        draws = round_sig(raw)
        rhat = float(az.rhat(draws, method="rank"))
        ess_bulk = float(az.ess(draws, method="bulk"))
        ess_tail = float(az.ess(draws, method="tail"))
        check(name, "rhat", rhat, direct_rhat(draws))
        check(name, "ess_bulk", ess_bulk, direct_ess_bulk(draws))
        check(name, "ess_tail", ess_tail, direct_ess_tail(draws))
        mcse_q = {}
        for p in QUANTILE_PROBS:
            got = float(az.mcse(draws, method="quantile", prob=p))
            check(name, f"mcse_quantile({p})", got, direct_mcse_quantile(draws, p))
            mcse_q[str(p)] = got
        out_cases.append(
            {
                "name": name,
                "description": description,
                "chains": [[float(v) for v in row] for row in draws],
                "rhat": rhat,
                "ess_bulk": ess_bulk,
                "ess_tail": ess_tail,
                "mcse_quantile": mcse_q,
            }
        )

    header = {
        "generator": "tests/reference/diagnostics_reference.py",
        "library": f"arviz {az.__version__}",
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": platform.python_version(),
        "method": (
            "rank-normalized split-Rhat (max of bulk and folded), bulk ESS and tail ESS, "
            "Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021), Bayesian Analysis 16(2), "
            "667-718; arviz.rhat(method='rank'), arviz.ess(method='bulk'|'tail'), "
            "arviz.mcse(method='quantile', prob=0.025|0.5|0.975)"
        ),
        "draws": f"rounded to {SIG_DIGITS} significant digits; diagnostics computed from the rounded values",
    }

    # Hand-assembled so that each chain sits on one line.
    lines = ["{"]
    for k, v in header.items():
        lines.append(f"  {json.dumps(k)}: {json.dumps(v, ensure_ascii=False)},")
    lines.append('  "cases": [')
    for i, c in enumerate(out_cases):
        lines.append("    {")
        for k in ("name", "description"):
            lines.append(f"      {json.dumps(k)}: {json.dumps(c[k])},")
        lines.append('      "chains": [')
        for j, row in enumerate(c["chains"]):
            sep = "," if j + 1 < len(c["chains"]) else ""
            lines.append("        " + json.dumps(row) + sep)
        lines.append("      ],")
        lines.append(f'      "rhat": {json.dumps(c["rhat"])},')
        lines.append(f'      "ess_bulk": {json.dumps(c["ess_bulk"])},')
        lines.append(f'      "ess_tail": {json.dumps(c["ess_tail"])},')
        lines.append(f'      "mcse_quantile": {json.dumps(c["mcse_quantile"])}')
        lines.append("    }" + ("," if i + 1 < len(out_cases) else ""))
    lines.append("  ]")
    lines.append("}")
    text = "\n".join(lines) + "\n"
    json.loads(text)  # must be valid JSON
    sys.stdout.write(text)


if __name__ == "__main__":
    main()
