#!/usr/bin/env bash
# Scale of the run store: a campaign of N runs of a trivial simulator (default 10,000),
# timing `assay run --jobs 2`, then `assay status` and `assay verify` on the finished
# campaign (median of R calls each), with the campaign's size on disk.
# Not part of `make test`. Usage: benches/scale_runs.sh [N] [R]
N=${1:-10000}
R=${2:-3}
. "$(dirname "$0")/common.sh"

printf '#!/bin/sh\nprintf "x,y\\n0,%%s\\n" "$1" > "$2"\n' > "$work/sim.sh"
chmod +x "$work/sim.sh"
printf 'x,y\n0,0.5\n' > "$work/field.csv"
printf '%s\n' "name: scale" "parameters:" "  - {name: a, range: [0.0, 1.0]}" \
  "  - {name: b, range: [0.0, 1.0]}" "simulator:" \
  "  command: [\"$work/sim.sh\", \"{{a}}\", \"{{run_dir}}/out.csv\"]" \
  "  output: {file: out.csv, x: x, y: [y]}" "experiments:" \
  "  - {name: e, data: field.csv, noise: {sd: 0.1}}" \
  "design: {method: random, points: $N, seed: 1}" > "$work/study.yaml"

# seconds COMMAND...: wall time of one call, output discarded.
seconds() { local s e; s=$(date +%s.%N); "$@" >/dev/null; e=$(date +%s.%N); awk "BEGIN{print $e - $s}"; }
a=("$assay" --runs "$work/runs" --quiet)

t_design=$(seconds "${a[@]}" design "$work/study.yaml")
t_run=$(seconds "${a[@]}" run --jobs 2 "$work/study.yaml")
t_status=$(for r in $(seq "$R"); do seconds "${a[@]}" status "$work/study.yaml"; done | median)
t_verify=$(for r in $(seq "$R"); do seconds "${a[@]}" verify "$work/study.yaml"; done | median)
t_rerun=$(seconds "${a[@]}" run --jobs 2 "$work/study.yaml")
size=$(du -sh "$work/runs" | cut -f1)
files=$(find "$work/runs" -type f | wc -l)
echo "machine: $(nproc) cores, $(uname -srm), load $(cut -d ' ' -f 1 /proc/loadavg) at the end"
echo "runs: $N (trivial simulator), jobs 2; status and verify: median of $R calls"
printf '%-28s %8.2f s\n' "assay design" "$t_design" "assay run (all $N)" "$t_run" \
  "assay run (nothing to do)" "$t_rerun" "assay status" "$t_status" "assay verify" "$t_verify"
echo "campaign folder: $size in $files files"
