#!/usr/bin/env bash
# Slurm backend overhead: N runs of a trivial simulator, submit-to-all-done wall time
# through a Slurm (e.g. the single-node one of tests/slurm/local-slurm) versus the local
# backend with as many jobs as the node has CPUs; median of R repeats.
# Not part of `make test`. Usage: benches/runs_slurm_vs_local.sh [N] [R] [POLL_S]
set -euo pipefail
N=${1:-200}
R=${2:-3}
POLL=${3:-1}
root=$(cd "$(dirname "$0")/.." && pwd)
assay="$root/target/release/assay"
[ -x "$assay" ] || (cd "$root" && cargo build --release --bin assay)
sinfo -h >/dev/null || { echo "Slurm does not answer: start it with tests/slurm/local-slurm start" >&2; exit 1; }
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cpus=$(nproc)

cat > "$work/sim.sh" <<'SIM'
#!/bin/sh
# trivial simulator: writes y = a at one x
printf 'x,y\n0,%s\n' "$1" > "$2"
SIM
chmod +x "$work/sim.sh"
printf 'x,y\n0,0.5\n' > "$work/field.csv"
cat > "$work/study.yaml" <<YAML
name: bench
parameters:
  - {name: a, range: [0.0, 1.0]}
simulator:
  command: ["$work/sim.sh", "{{a}}", "{{run_dir}}/out.csv"]
  output: {file: out.csv, x: x, y: [y]}
experiments:
  - {name: e, data: field.csv, noise: {sd: 0.1}}
design: {method: lhs, points: $N, seed: 1}
execution: {slurm: {poll_s: $POLL}}
YAML

median() { sort -n | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
t_slurm=(); t_local=()
for r in $(seq "$R"); do
  for b in slurm local; do
    rm -rf "$work/runs"
    "$assay" --runs "$work/runs" --quiet design "$work/study.yaml" >/dev/null
    s=$(date +%s.%N)
    "$assay" --runs "$work/runs" --quiet run --backend "$b" --jobs "$cpus" "$work/study.yaml" >/dev/null 2>&1
    e=$(date +%s.%N)
    t=$(awk "BEGIN{print $e - $s}")
    if [ "$b" = slurm ]; then t_slurm+=("$t"); else t_local+=("$t"); fi
  done
done
chunk=$(scontrol show config | awk -F= '/^MaxArraySize/ {gsub(/ /, "", $2); print $2}')
ts=$(printf '%s\n' "${t_slurm[@]}" | median)
tl=$(printf '%s\n' "${t_local[@]}" | median)
echo "machine: $cpus cores, $(uname -srm); Slurm $(sinfo --version | awk '{print $2}'), MaxArraySize $chunk"
echo "runs: $N, repeats: $R (median wall time), poll_s: $POLL, arrays of up to $chunk tasks"
printf '%-14s %8.2f s  (%6.1f ms/run)\n' "slurm" "$ts" "$(awk "BEGIN{print $ts * 1000 / $N}")"
printf '%-14s %8.2f s  (%6.1f ms/run)\n' "local -j $cpus" "$tl" "$(awk "BEGIN{print $tl * 1000 / $N}")"
printf 'ratio slurm/local: %.1f\n' "$(awk "BEGIN{print $ts / $tl}")"
