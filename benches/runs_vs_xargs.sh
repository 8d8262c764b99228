#!/usr/bin/env bash
# Run-manager overhead: N runs of a trivial simulator with 2 jobs, assay versus
# `xargs -P 2` running the same command, wall time side by side (median of R repeats).
# Not part of `make test`. Usage: benches/runs_vs_xargs.sh [N] [R]
N=${1:-1000}
R=${2:-3}
. "$(dirname "$0")/common.sh"

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
YAML

t_assay=(); t_xargs=()
for r in $(seq "$R"); do
  rm -rf "$work/runs" "$work/x"
  "$assay" --runs "$work/runs" --quiet design "$work/study.yaml" >/dev/null
  s=$(date +%s.%N)
  "$assay" --runs "$work/runs" --quiet run --jobs 2 "$work/study.yaml" >/dev/null
  e=$(date +%s.%N)
  t_assay+=("$(awk "BEGIN{print $e - $s}")")

  mkdir -p "$work/x"
  s=$(date +%s.%N)
  seq "$N" | xargs -P 2 -I{} sh -c "mkdir -p '$work/x/{}' && '$work/sim.sh' 0.{} '$work/x/{}/out.csv'"
  e=$(date +%s.%N)
  t_xargs+=("$(awk "BEGIN{print $e - $s}")")
done
ta=$(printf '%s\n' "${t_assay[@]}" | median)
tx=$(printf '%s\n' "${t_xargs[@]}" | median)
echo "machine: $(nproc) cores, $(uname -srm)"
echo "runs: $N, jobs: 2, repeats: $R (median wall time)"
printf '%-10s %8.2f s  (%6.2f ms/run)\n' assay "$ta" "$(awk "BEGIN{print $ta * 1000 / $N}")"
printf '%-10s %8.2f s  (%6.2f ms/run)\n' "xargs -P2" "$tx" "$(awk "BEGIN{print $tx * 1000 / $N}")"
printf 'ratio assay/xargs: %.2f (target <= 1.5)\n' "$(awk "BEGIN{print $ta / $tx}")"
