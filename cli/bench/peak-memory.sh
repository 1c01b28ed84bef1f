#!/usr/bin/env bash
# peak-memory.sh: the peak resident memory (VmHWM of /proc/PID/status) of
# a real flowcat server while it takes one CSV, whole or as nightly
# appends cut by the date of its occurred_at column.
#
#   cli/bench/peak-memory.sh BIN CSV [NIGHTS] [COLUMN]
#
# BIN is a built flowcat binary (go build -o /tmp/flowcat ./cli/flowcat),
# CSV a file in the schema's own column names (schema/synth/gen makes
# them), NIGHTS 1 (default: one upload) or more (the file is cut into
# its dates, then uploaded as that many appends, the dates spread evenly),
# COLUMN the 1-based column of occurred_at (default 8). It prints one line
# per upload (seconds, the server's CPU seconds and its minor page
# faults) and the server's VmHWM. PROFILE, when set, is the dataset's mapping profile. Loopback only.
set -euo pipefail
bin=$(realpath "$1"); csv=$(realpath "$2"); nights=${3:-1}; col=${4:-8}
work=$(mktemp -d); trap 'kill "$pid" 2>/dev/null || true; rm -rf "$work"' EXIT
"$bin" init --data "$work/data" >/dev/null
port=$(( 20000 + RANDOM % 20000 ))
"$bin" serve --data "$work/data" --addr "127.0.0.1:$port" 2>"$work/server.log" & pid=$!
for _ in $(seq 100); do curl -fs "http://127.0.0.1:$port/api/v1/schema" >/dev/null 2>&1 && break; sleep 0.1; done
export FLOWCAT_SERVER="http://127.0.0.1:$port"
export FLOWCAT_TOKEN=$("$bin" token issue --data "$work/data" --role admin --subject bench --ttl 10h)
"$bin" project create bench >/dev/null
"$bin" dataset create bench/line ${PROFILE:+--profile "$PROFILE"} >/dev/null
export FLOWCAT_TOKEN=$("$bin" token issue --data "$work/data" --role partner --subject site --dataset bench/line --ttl 10h)
parts=()
if [ "$nights" -le 1 ]; then
  parts=("$csv")
else
  head -1 "$csv" > "$work/header"
  tail -n +2 "$csv" | awk -F, -v c="$col" -v d="$work" '{ print > (d "/day-" substr($c, 1, 10)) }'
  days=("$work"/day-*); n=${#days[@]}
  for i in $(seq 0 $((nights - 1))); do
    out="$work/night-$i.csv"; cp "$work/header" "$out"
    lo=$(( i * n / nights )); hi=$(( (i + 1) * n / nights ))
    for j in $(seq $lo $((hi - 1))); do cat "${days[$j]}" >> "$out"; done
    parts+=("$out")
  done
  rm -f "$work"/day-*
fi
# The server's CPU time (user and system, /proc/PID/stat fields 14 and 15)
# in seconds: on a noisy machine steadier than the elapsed time.
cpu() { awk -v hz="$(getconf CLK_TCK)" '{ printf "%.2f", ($14 + $15) / hz }' "/proc/$pid/stat"; }
# Its minor page faults (field 10): about one a 4 KiB page first touched.
faults() { awk '{ print $10 }' "/proc/$pid/stat"; }
for p in "${parts[@]}"; do
  t0=$(date +%s.%N); c0=$(cpu); f0=$(faults)
  "$bin" upload bench/line "$p" >/dev/null
  t1=$(date +%s.%N); c1=$(cpu); f1=$(faults)
  echo "upload $(basename "$p"): $(echo "$t1 - $t0" | bc) s, server cpu $(echo "$c1 - $c0" | bc) s, $((f1 - f0)) minor faults"
done
grep VmHWM "/proc/$pid/status"
