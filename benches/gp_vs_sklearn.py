#!/usr/bin/env python3
"""GP fit and prediction, assay versus scikit-learn, side by side (not part of `make test`).

Borehole function (Harper & Gupta 1983; ranges of Morris, Mitchell & Ylvisaker 1993),
d = 8, training sets of n = 250, 500, 1000 Latin-hypercube points, 1,000 held-out points,
Matérn 5/2 ARD kernel with a nugget, 4 optimiser starts on both sides, and prediction with
standard deviations at 100,000 points. Both sides get identical data (written here).

Run from the repository root:
    python3 -m venv .venv && .venv/bin/pip install scikit-learn numpy scipy
    .venv/bin/python benches/gp_vs_sklearn.py [n ...]
"""
import json, os, subprocess, sys, tempfile, time
import numpy as np
from scipy.stats import qmc
import sklearn
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

RANGES = np.array([(0.05, 0.15), (100, 50000), (63070, 115600), (990, 1110),
                   (63.1, 116), (700, 820), (1120, 1680), (9855, 12045)])

def borehole(u):
    x = RANGES[:, 0] + u * (RANGES[:, 1] - RANGES[:, 0])
    rw, r, tu, hu, tl, hl, l, kw = x.T
    lr = np.log(r / rw)
    return 2 * np.pi * tu * (hu - hl) / (lr * (1 + 2 * l * tu / (lr * rw**2 * kw) + tu / tl))

def main():
    sizes = [int(a) for a in sys.argv[1:]] or [250, 500, 1000]
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    subprocess.run(["cargo", "build", "--release", "-p", "assay", "--example", "gp_bench"], cwd=root, check=True)
    exe = os.path.join(root, "target", "release", "examples", "gp_bench")
    rng = np.random.default_rng(7)
    test = rng.random((1000, 8)); yt = borehole(test)
    pred = rng.random((100_000, 8))
    print(f"machine: {os.cpu_count()} cores; scikit-learn {sklearn.__version__}, numpy {np.__version__}")
    print(f"{'n':>6} {'assay fit s':>12} {'sklearn fit s':>14} {'ratio':>7} {'assay rmse %sd':>15} {'sklearn rmse %sd':>17} {'assay pred/s':>13} {'sklearn pred/s':>15}")
    with tempfile.TemporaryDirectory() as tmp:
        np.savetxt(f"{tmp}/test.csv", np.column_stack([test, yt]), delimiter=",")
        np.savetxt(f"{tmp}/pred.csv", np.column_stack([pred, np.zeros(len(pred))]), delimiter=",")
        for n in sizes:
            x = qmc.LatinHypercube(d=8, seed=n).random(n); y = borehole(x)
            np.savetxt(f"{tmp}/train.csv", np.column_stack([x, y]), delimiter=",")
            out = subprocess.run([exe, f"{tmp}/train.csv", f"{tmp}/test.csv", "4", f"{tmp}/pred.csv"],
                                 capture_output=True, text=True, check=True).stdout
            a = json.loads(out)
            kernel = ConstantKernel(1.0) * Matern(length_scale=np.full(8, 0.5), nu=2.5) + WhiteKernel(1e-6)
            gp = GaussianProcessRegressor(kernel, normalize_y=True, n_restarts_optimizer=3, random_state=0)
            t0 = time.perf_counter(); gp.fit(x, y); fit_s = time.perf_counter() - t0
            rmse = np.sqrt(np.mean((gp.predict(test) - yt) ** 2)) / yt.std() * 100
            t0 = time.perf_counter(); gp.predict(pred, return_std=True); pred_s = time.perf_counter() - t0
            print(f"{n:>6} {a['fit_s']:>12.2f} {fit_s:>14.2f} {fit_s / a['fit_s']:>7.1f} {a['rmse_pct_sd']:>15.3f} {rmse:>17.3f} "
                  f"{a['predict_points'] / a['predict_s']:>13.0f} {len(pred) / pred_s:>15.0f}")

if __name__ == "__main__":
    main()
