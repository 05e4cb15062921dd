#!/usr/bin/env bash
# Times every command the demo prints, run with the published command line (README, Set-up), on a demo store.
# Usage: bash tests/DriftWatch.Benchmarks/cli-commands.sh [STORE] [RUNS]
#   STORE  a demo store (default: trains one with the demo's defaults into a temp folder)
#   RUNS   timed runs of each command after one untimed warm-up (default 10)
# Prints one line per command: median, fastest and slowest wall time in seconds. A figure for docs/performance.md, not a test.
set -euo pipefail
cd "$(dirname "$0")/../.."
cli=.driftwatch/bin/driftwatch
[ -x "$cli" ] || dotnet publish src/DriftWatch.Cli -c Release -o .driftwatch/bin >/dev/null
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
store=${1:-}
if [ -z "$store" ]; then
  store=$work/greenhouse.litedb
  dotnet run --project demo/DriftWatch.Demo -c Release -- --store "$store" >"$work/demo.log"
fi
runs=${2:-10}
run=$("$cli" runs --store "$store" --json | python3 -c 'import json,sys; print(json.load(sys.stdin)[-1]["name"])')
layer=_scorer.1

time_one() { # prints the seconds one run of "$@" took (output discarded; charts go to the temp folder)
  local start end
  start=$(date +%s%N)
  (cd "$work" && "$@" >/dev/null 2>&1)
  end=$(date +%s%N)
  echo "scale=3; ($end - $start) / 1000000000" | bc
}

echo "machine: $(nproc) cores, $(awk '/MemTotal/ {printf "%.0f GB", $2/1048576}' /proc/meminfo), load $(cut -d' ' -f1-3 /proc/loadavg) (1/5/15 min) at start"
echo "store: $store ($("$cli" show "$run" --store "$store" --json | python3 -c 'import json,sys; print(len(json.load(sys.stdin)["epochs"]))') epochs)"
abs=$(realpath "$cli")
for command in "runs --store $store" "show $run --store $store" "chart $run --store $store" "neurons $run --layer $layer --store $store"; do
  # shellcheck disable=SC2086
  time_one "$abs" $command >/dev/null # warm-up: the file cache, not the program, is what it fills
  times=$(for _ in $(seq "$runs"); do time_one "$abs" $command; done | sort -n)
  median=$(echo "$times" | awk '{a[NR]=$1} END {print (NR % 2) ? a[(NR+1)/2] : (a[NR/2] + a[NR/2+1]) / 2}')
  printf '%-10s median %5.2f s  fastest %5.2f s  slowest %5.2f s  (%d runs)\n' "${command%% *}" "$median" "$(echo "$times" | head -1)" "$(echo "$times" | tail -1)" "$runs"
done
echo "load $(cut -d' ' -f1-3 /proc/loadavg) at end"
