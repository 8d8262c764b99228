"""Space-filling designs of 1,000 points in 8 dimensions: assay versus scipy.

Rows (same machine, same Python process driving both):

* assay `lhs` (maximin Latin hypercube with the discrepancy stage), timed as the whole
  `assay design` command on a study with 8 parameters in [0, 1] and 1,000 points
  (process start, design, quality metrics and the YAML record included);
* scipy `LatinHypercube(8, optimization="random-cd")`, the scipy design that optimises
  the centered L2 discrepancy;
* for reference: a plain scipy Latin hypercube, and scrambled Sobol' points of both
  (1,024 points, the nearest power of two).

For each: wall time, CPU time, the squared centered L2 discrepancy CD² computed by
scipy (`qmc.discrepancy(x, method="CD")`, Hickernell 1998) and the minimum pairwise
distance, all on the points read back (for assay, from design.yaml). Not part of
`make test`; timings depend on the machine and its load.

How to run (from the repository root):

    cargo build --release --bin assay
    python3 -m venv .venv && .venv/bin/pip install scipy pyyaml
    .venv/bin/python benches/design_vs_scipy.py [--seeds 1] [--n 1000] [--d 8]
"""

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time

import numpy as np
import scipy
import yaml
from scipy.spatial.distance import pdist
from scipy.stats import qmc

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
ASSAY = os.path.join(ROOT, "target", "release", "assay")


def study_text(n, d, method, seed):
    params = "\n".join(f"  - name: x{j}\n    range: [0.0, 1.0]" for j in range(d))
    return f"""name: bench
parameters:
{params}
simulator:
  command: ["/bin/true"]
  output: {{file: out.csv, y: [y]}}
experiments:
  - name: e
    data: field.csv
    noise: {{sd: 0.1}}
design: {{method: {method}, points: {n}, seed: {seed}}}
"""


def children_cpu():
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def run_assay(work, n, d, method, seed):
    with open(os.path.join(work, "field.csv"), "w") as f:
        f.write("y\n1.0\n")
    study = os.path.join(work, "study.yaml")
    with open(study, "w") as f:
        f.write(study_text(n, d, method, seed))
    runs = os.path.join(work, "runs")
    cmd = [ASSAY, "--runs", runs, "--quiet", "design", "--force", study]
    cpu0, t0 = children_cpu(), time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
    wall, cpu = time.perf_counter() - t0, children_cpu() - cpu0
    with open(os.path.join(runs, "bench", "design.yaml")) as f:
        rec = yaml.safe_load(f)
    names = rec["parameters"]
    x = np.array([[p[k] for k in names] for p in rec["points"]])
    return x, wall, cpu


def run_scipy(make):
    cpu0, t0 = time.process_time(), time.perf_counter()
    x = make()
    return x, time.perf_counter() - t0, time.process_time() - cpu0


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1000)
    ap.add_argument("--d", type=int, default=8)
    ap.add_argument("--seeds", type=int, default=1, help="repeats with seeds 1..S (medians shown)")
    args = ap.parse_args()
    if not os.access(ASSAY, os.X_OK):
        sys.exit(f"build assay first: cargo build --release --bin assay ({ASSAY} missing)")
    n, d = args.n, args.d
    n2 = 1 << (n - 1).bit_length()
    rows = {}

    def add(name, x, wall, cpu):
        r = rows.setdefault(name, {"wall": [], "cpu": [], "cd2": [], "mind": [], "n": len(x)})
        r["wall"].append(wall)
        r["cpu"].append(cpu)
        r["cd2"].append(float(qmc.discrepancy(x, method="CD")))
        r["mind"].append(float(pdist(x).min()))

    with tempfile.TemporaryDirectory() as work:
        for seed in range(1, args.seeds + 1):
            add("assay lhs (maximin + CD stage)", *run_assay(work, n, d, "lhs", seed))
            add(
                'scipy LatinHypercube random-cd',
                *run_scipy(lambda: qmc.LatinHypercube(d, optimization="random-cd", rng=seed).random(n)),
            )
            add("scipy LatinHypercube plain", *run_scipy(lambda: qmc.LatinHypercube(d, rng=seed).random(n)))
            add("assay sobol (scrambled)", *run_assay(work, n2, d, "sobol", seed))
            add("scipy Sobol (scrambled)", *run_scipy(lambda: qmc.Sobol(d, rng=seed).random(n2)))

    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"{n} x {d} designs (Sobol' rows: {n2} points); medians over {args.seeds} seed(s); "
          f"scipy {scipy.__version__}, numpy {np.__version__}; {os.cpu_count()} CPUs, load {load:.1f}")
    print(f"{'design':<34} {'points':>6} {'wall s':>8} {'cpu s':>8} {'CD²':>11} {'min dist':>9}")
    for name, r in rows.items():
        med = {k: statistics.median(v) for k, v in r.items() if k != "n"}
        print(f"{name:<34} {r['n']:>6} {med['wall']:>8.2f} {med['cpu']:>8.2f} "
              f"{med['cd2']:>11.4e} {med['mind']:>9.4f}")


if __name__ == "__main__":
    main()
