# Set-up shared by the shell benchmarks, sourced by them: strict mode, the repository
# root, a release build of assay, a temporary work folder removed on exit, median().
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
assay="$root/target/release/assay"
[ -x "$assay" ] || (cd "$root" && cargo build --release --bin assay)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
# median: the middle of the numbers on stdin, one per line.
median() { sort -n | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
