#!/usr/bin/env bash
# Times every command the demo prints, run with the published command line (README, Set-up), on a demo store, and the
# same commands through `dotnet run --project src/DriftWatch.Cli -c Release --` (what the demo printed before; an
# up-to-date build, so no compilation: the cost of the build check alone) for the ratio.
# Usage: bash tests/DriftWatch.Benchmarks/cli-commands.sh [STORE] [RUNS]
#   STORE  a demo store (default: trains one with the demo's defaults into a temp folder)
#   RUNS   timed runs of each command after one untimed warm-up (default 10)
# Prints per command the median wall time and the median CPU time (user + system, all threads), in seconds. On a loaded
# machine the wall time grows with the load and the CPU time much less. A figure for docs/performance.md, not a test.
set -euo pipefail
cd "$(dirname "$0")/../.."
root=$PWD
cli=$root/.driftwatch/bin/driftwatch
[ -x "$cli" ] || dotnet publish src/DriftWatch.Cli -c Release -o .driftwatch/bin >/dev/null
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
store=${1:-}
if [ -z "$store" ]; then
  store=$work/greenhouse.litedb
  dotnet run --project demo/DriftWatch.Demo -c Release -- --store "$store" >"$work/demo.log"
fi
store=$(realpath "$store")
runs=${2:-10}
run=$("$cli" runs --store "$store" --json | python3 -c 'import json,sys; print(json.load(sys.stdin)[-1]["name"])')
layer=_scorer.1

# One run of "$@" in the temp folder (charts go there), output discarded; prints "wall cpu".
time_one() {
  local TIMEFORMAT='%R %U %S' line
  line=$( { time (cd "$work" && "$@" >/dev/null 2>&1) ; } 2>&1 )
  echo "$line" | awk '{printf "%.3f %.3f\n", $1, $2 + $3}'
}
median() { sort -n | awk '{a[NR]=$1} END {print (NR % 2) ? a[(NR+1)/2] : (a[NR/2] + a[NR/2+1]) / 2}'; }

echo "machine: $(nproc) cores, $(awk '/MemTotal/ {printf "%.0f GB", $2/1048576}' /proc/meminfo), $(uname -m), load $(cut -d' ' -f1-3 /proc/loadavg) (1/5/15 min) at start"
echo "store: $store ($("$cli" show "$run" --store "$store" --json | python3 -c 'import json,sys; print(len(json.load(sys.stdin)["epochs"]))') epochs)"
printf '%-9s %-34s %-34s %s\n' command "published: wall / cpu (median s)" "dotnet run: wall / cpu (median s)" "cpu ratio"
for command in "runs --store $store" "show $run --store $store" "chart $run --store $store" "neurons $run --layer $layer --store $store"; do
  # shellcheck disable=SC2086
  time_one "$cli" $command >/dev/null # warm-up: fills the file cache
  published=$(for _ in $(seq "$runs"); do time_one "$cli" $command; done)
  # shellcheck disable=SC2086
  viarun=$(for _ in $(seq "$runs"); do time_one dotnet run --project "$root/src/DriftWatch.Cli" -c Release -- $command; done)
  pw=$(echo "$published" | cut -d' ' -f1 | median); pc=$(echo "$published" | cut -d' ' -f2 | median)
  rw=$(echo "$viarun" | cut -d' ' -f1 | median); rc=$(echo "$viarun" | cut -d' ' -f2 | median)
  printf '%-9s %-34s %-34s %s\n' "${command%% *}" "$pw / $pc" "$rw / $rc" "$(echo "scale=2; $pc / $rc" | bc)"
done
echo "load $(cut -d' ' -f1-3 /proc/loadavg) at end; $runs runs of each after one warm-up"
