#!/bin/sh
# Calibration over conditions at the scale of our numpy baseline: a GP over
# 4 controls and 4 parameters, 250 runs, 30 field observations.
#
#   benches/controls_8d.sh [assay binary]     (default: target/release/assay)
#
# Builds a study in a temporary folder: an invented simulator (awk, an external process)
#   y = t1 exp(-t2 x1) + t3 x2 x3 + sin(t4 x4) + 0.1 x1 x4
# over controls x1..x4 in [0, 1] and parameters t1 in [1, 3], t2 in [0.5, 2],
# t3 in [-1, 1], t4 in [1, 4]; field data: 30 invented conditions and values made with
# (t1, t2, t3, t4) = (2, 1, 0.3, 2.5) plus noise of sd 0.02 (seeded awk rand).
# Runs `assay all` (joint design of 250 points) and prints the fit and calibration
# times, log-posterior evaluations per second and bulk ESS per second, read from the
# records. For scale, our reference figure for a hand-written numpy GP-mean likelihood
# over the same sizes is 7,500 evaluations/s (not measured by this script; that baseline
# counts no surrogate variance and no covariance across conditions; assay's evaluations
# do both).
set -eu
ASSAY=${1:-target/release/assay}
case "$ASSAY" in /*) ;; *) ASSAY="$(pwd)/$ASSAY" ;; esac
DIR=$(mktemp -d)
trap 'rm -rf "$DIR"' EXIT
cd "$DIR"
cat > sim.sh <<'SIM'
#!/bin/sh
LC_ALL=C awk -v x1="$1" -v x2="$2" -v x3="$3" -v x4="$4" -v t1="$5" -v t2="$6" -v t3="$7" -v t4="$8" \
  'BEGIN { print "y"; printf "%.17g\n", t1*exp(-t2*x1) + t3*x2*x3 + sin(t4*x4) + 0.1*x1*x4 }' > "$9"
SIM
chmod +x sim.sh
LC_ALL=C awk 'BEGIN { srand(12); print "x1,x2,x3,x4,y";
  for (i = 0; i < 30; i++) { x1 = rand(); x2 = rand(); x3 = rand(); x4 = rand();
    u1 = rand(); u2 = rand(); z = sqrt(-2 * log(u1 + 1e-300)) * cos(6.283185307179586 * u2);
    y = 2*exp(-1*x1) + 0.3*x2*x3 + sin(2.5*x4) + 0.1*x1*x4 + 0.02 * z;
    printf "%.6f,%.6f,%.6f,%.6f,%.6f\n", x1, x2, x3, x4, y } }' > field.csv
cat > study.yaml <<'YAML'
name: cond8
controls:
  - {name: x1, range: [0.0, 1.0]}
  - {name: x2, range: [0.0, 1.0]}
  - {name: x3, range: [0.0, 1.0]}
  - {name: x4, range: [0.0, 1.0]}
parameters:
  - {name: t1, range: [1.0, 3.0]}
  - {name: t2, range: [0.5, 2.0]}
  - {name: t3, range: [-1.0, 1.0]}
  - {name: t4, range: [1.0, 4.0]}
simulator:
  command: [./sim.sh, "{{x1}}", "{{x2}}", "{{x3}}", "{{x4}}", "{{t1}}", "{{t2}}", "{{t3}}", "{{t4}}", "{{run_dir}}/out.csv"]
  output: {file: out.csv, format: csv, y: [y]}
experiments:
  - {name: field, data: field.csv, noise: {sd: 0.02}}
design: {points: 250, seed: 3}
surrogate: {kernel: matern52, mean: linear}
calibration: {chains: 4, warmup: 2000, draws: 5000, seed: 1}
YAML
"$ASSAY" --quiet all study.yaml > log.txt 2>&1 || { cat log.txt; exit 1; }
grep -E "^  (t[1-4]) " log.txt || true
python3 - <<'PY' 2>/dev/null || awk '/elapsed_s:/ {print}' runs/cond8/surrogate.yaml runs/cond8/posterior.yaml
import re
def field(path, key):
    m = re.search(r"^\s*" + key + r":\s*([0-9.eE+-]+)", open(path).read(), re.M)
    return float(m.group(1))
fit = field("runs/cond8/surrogate.yaml", "elapsed_s")
cal = field("runs/cond8/posterior.yaml", "elapsed_s")
nev = field("runs/cond8/posterior.yaml", "n_evaluations")
text = open("runs/cond8/posterior.yaml").read()
ess = [float(v) for v in re.findall(r"ess_bulk:\s*([0-9.eE+-]+)", text)]
print(f"fit: {fit:.2f} s (250 runs, 8 inputs)")
print(f"calibrate: {cal:.2f} s, {nev:.0f} log-posterior evaluations = {nev / cal:,.0f} evaluations/s")
print(f"bulk ESS (smallest of the parameters): {min(ess):.0f} = {min(ess) / cal:,.0f} per second")
PY
