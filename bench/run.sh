#!/usr/bin/env bash
# bench/run.sh: flowcat side by side with its peers, in one run on one
# machine, so that the ratios hold however loaded the machine is.
#
#   bench/run.sh [EVENTS] [ROUNDS] [WRK_SECONDS]
#
#   EVENTS       events of the generated service line (default 1000000)
#   ROUNDS       ingest rounds of each side, interleaved (default 3)
#   WRK_SECONDS  length of each wrk run (default 5; 0: ingest only, no
#                serving comparison)
#
# Environment: FLOWCAT_BIN (a built flowcat binary; default: built from this
# checkout), BENCH_CSV (a CSV to use instead of generating one), WRK_THREADS
# (default 2), WRK_CONNECTIONS (default 16), BENCH_PER_HOUR (cases arriving
# an hour in the generated line, default 10000), BENCH_SERVE_ROUNDS (wrk
# rounds, default ROUNDS up to 3).
#
# What it does, all on loopback, in a temporary folder removed at the end:
#  1. Writes EVENTS events of a contact line in the schema's own columns
#     (go run ./schema/synth/gen -kind line -per-hour 10000).
#  2. ROUNDS times, alternating which side goes first:
#     - flowcat: a fresh data folder, a real server (flowcat serve), a
#       project, a dataset and tokens made with the CLI, then the upload
#       timed as the whole client process (flowcat upload returns once the
#       version is committed), and the server's peak resident memory
#       (VmHWM of /proc/PID/status) read after it;
#     - DuckDB (npm @duckdb/node-api, bench/package-lock.json): the same
#       CSV to one zstd Parquet file, timed as the whole node process.
#  3. nginx (Debian nginx-light) serves a copy of the stored Parquet file
#     and copies of the stored summary (as JSON and as its stored gzip);
#     wrk, with the same threads, connections and duration, fetches
#     - the file from nginx, then from flowcat with a token
#       (GET .../versions/latest/files/ID),
#     - the summary JSON from nginx, then from flowcat
#       (GET .../versions/latest/summary), plain and with
#       Accept-Encoding: gzip (flowcat stores it gzip-compressed).
#  4. Prints the medians, the ratios, and the peak memory.
#
# Both servers write an access log (flowcat its request log to a file,
# nginx its access_log), and nginx runs with sendfile on and one worker a
# core (worker_processes auto). The figures are for comparing in one run,
# not thresholds: the script fails only when something does not work
# (a tool missing, an upload refused, a non-2xx answer).
#
# Needs: Go, node and npm (bench/node_modules is installed with npm ci
# when missing), nginx, wrk, curl, jq.
set -euo pipefail
cd "$(dirname "$0")/.."
events=${1:-1000000}
rounds=${2:-3}
wrk_seconds=${3:-5}
threads=${WRK_THREADS:-2}
conns=${WRK_CONNECTIONS:-16}
per_hour=${BENCH_PER_HOUR:-10000}

for tool in go node npm nginx wrk curl jq; do
  command -v "$tool" >/dev/null 2>&1 || [ -x "/usr/sbin/$tool" ] || {
    echo "bench: $tool not found (Debian: apt-get install nginx-light wrk curl jq nodejs npm)" >&2
    exit 1
  }
done
nginx_bin=$(command -v nginx || echo /usr/sbin/nginx)

work=$(mktemp -d)
pids=()
cleanup() {
  for p in "${pids[@]}"; do kill "$p" 2>/dev/null || true; done
  for p in "${pids[@]}"; do wait "$p" 2>/dev/null || true; done
  rm -rf "$work"
}
trap cleanup EXIT
trap "exit 143" INT TERM

[ -d bench/node_modules/@duckdb/node-api ] || npm ci --prefix bench --no-audit --no-fund >/dev/null

if [ -n "${FLOWCAT_BIN:-}" ]; then
  bin=$(realpath "$FLOWCAT_BIN")
else
  bin="$work/flowcat"
  go build -o "$bin" ./cli/flowcat
fi
if [ -n "${BENCH_CSV:-}" ]; then
  csv=$(realpath "$BENCH_CSV")
else
  csv="$work/line.csv"
  go run ./schema/synth/gen -kind line -events "$events" -per-hour "$per_hour" >"$csv"
fi
rows=$(($(wc -l <"$csv") - 1))
csv_mb=$(echo "scale=1; $(stat -c %s "$csv") / 1000000" | bc)

now() { date +%s.%N; }
elapsed() { echo "scale=3; ($2 - $1) / 1" | bc; }
# median of the numbers given as arguments
median() { printf '%s\n' "$@" | sort -g | awk '{a[NR]=$1} END {if (NR%2) print a[(NR+1)/2]; else printf "%.3f\n", (a[NR/2]+a[NR/2+1])/2}'; }
free_port() {
  local p
  while :; do
    p=$((20000 + RANDOM % 20000))
    (exec 3<>"/dev/tcp/127.0.0.1/$p") 2>/dev/null || { echo "$p"; return; }
  done
}
wait_port() {
  for _ in $(seq 100); do
    (exec 3<>"/dev/tcp/127.0.0.1/$1") 2>/dev/null && return 0
    sleep 0.1
  done
  echo "bench: nothing listens on 127.0.0.1:$1" >&2
  return 1
}

# start_server DATA [FLAG...]: a flowcat server on DATA; sets srv_pid and
# srv_url.
start_server() {
  local port data=$1
  shift
  port=$(free_port)
  "$bin" serve --data "$data" --addr "127.0.0.1:$port" "$@" 2>>"$work/server.log" &
  srv_pid=$!
  pids+=("$srv_pid")
  srv_url="http://127.0.0.1:$port"
  wait_port "$port"
}
stop_server() {
  kill "$srv_pid" 2>/dev/null || true
  wait "$srv_pid" 2>/dev/null || true
}
hwm_kb() { awk '/^VmHWM/ {print $2}' "/proc/$1/status"; }

flowcat_s=(); flowcat_hwm=(); duck_s=(); duck_rss=()
round_flowcat() {
  local data="$work/data-$1" t0 t1
  rm -rf "$work"/data-*
  "$bin" init --data "$data" >/dev/null
  start_server "$data"
  export FLOWCAT_SERVER="$srv_url"
  FLOWCAT_TOKEN=$("$bin" token issue --data "$data" --role admin --subject bench --ttl 2h 2>>"$work/cli.log")
  export FLOWCAT_TOKEN
  "$bin" project create bench >/dev/null
  "$bin" dataset create bench/line >/dev/null
  FLOWCAT_TOKEN=$("$bin" token issue --data "$data" --role partner --subject site --dataset bench/line --ttl 2h 2>>"$work/cli.log")
  t0=$(now)
  "$bin" upload -q bench/line "$csv" >/dev/null
  t1=$(now)
  flowcat_s+=("$(elapsed "$t0" "$t1")")
  flowcat_hwm+=("$(hwm_kb "$srv_pid")")
  last_data=$data
  stop_server
}
round_duckdb() {
  local t0 t1 out
  rm -f "$work/duck.parquet"
  t0=$(now)
  out=$(node bench/duckdb-convert.mjs "$csv" "$work/duck.parquet")
  t1=$(now)
  [ "${out%% *}" = "rows=$rows" ] || { echo "bench: DuckDB wrote $out, want rows=$rows" >&2; exit 1; }
  duck_s+=("$(elapsed "$t0" "$t1")")
  duck_rss+=("${out##*maxrss_kb=}")
}

echo "bench: $rows events ($csv_mb MB CSV), $rounds rounds; $(nproc) cores, load average $(cut -d' ' -f1-3 /proc/loadavg)" >&2
for r in $(seq "$rounds"); do
  if [ $((r % 2)) -eq 1 ]; then round_flowcat "$r"; round_duckdb; else round_duckdb; round_flowcat "$r"; fi
  echo "bench: round $r: flowcat ${flowcat_s[-1]} s (VmHWM ${flowcat_hwm[-1]} kB), DuckDB ${duck_s[-1]} s" >&2
done

if [ "$wrk_seconds" -eq 0 ]; then
  fc=$(median "${flowcat_s[@]}"); dk=$(median "${duck_s[@]}")
  echo "ingest $rows events: flowcat ${flowcat_s[*]} s (median $fc), DuckDB ${duck_s[*]} s (median $dk), ratio $(echo "scale=2; $fc / $dk" | bc); VmHWM ${flowcat_hwm[*]} kB; DuckDB maxRSS ${duck_rss[*]} kB"
  exit 0
fi

# Serving: the last round's catalog behind a fresh server, without the
# per-token request rate limit (wrk sends thousands a second on one token;
# the limiter would answer most with 429).
start_server "$last_data" --rate-limit -1
FLOWCAT_TOKEN=$("$bin" token issue --data "$last_data" --role member --project bench --subject reader --ttl 2h 2>>"$work/cli.log")
auth="Authorization: Bearer $FLOWCAT_TOKEN"
vurl="$srv_url/api/v1/projects/bench/datasets/line/versions/latest"
file_id=$(curl -fsS -H "$auth" "$vurl" | jq -r '[.. | objects | select(has("sha256") and has("rows")) | .sha256][0]')
[ -n "$file_id" ] && [ "$file_id" != null ] || { echo "bench: no file in the version" >&2; exit 1; }
www="$work/www"
mkdir -p "$www"
curl -fsS -H "$auth" -o "$www/file.parquet" "$vurl/files/$file_id"
curl -fsS -H "$auth" -o "$www/summary.json" "$vurl/summary"
curl -fsS -H "$auth" -H 'Accept-Encoding: gzip' -o "$www/summary.json.gz" "$vurl/summary"
[ "$(sha256sum <"$www/file.parquet" | cut -c1-64)" = "$file_id" ] || { echo "bench: the download's sha256 is not its id" >&2; exit 1; }
chmod 755 "$work" "$www"
chmod 644 "$www"/*

ngx="$work/nginx"
mkdir -p "$ngx/logs"
ngx_port=$(free_port)
cat >"$ngx/nginx.conf" <<EOF
daemon off;
worker_processes auto;
pid $ngx/nginx.pid;
error_log $ngx/logs/error.log;
$( [ "$(id -u)" -eq 0 ] && echo "user root;" )
events { worker_connections 1024; }
http {
  access_log $ngx/logs/access.log;
  sendfile on;
  tcp_nopush on;
  keepalive_requests 1000000;
  client_body_temp_path $ngx/body;
  proxy_temp_path $ngx/proxy;
  fastcgi_temp_path $ngx/fastcgi;
  uwsgi_temp_path $ngx/uwsgi;
  scgi_temp_path $ngx/scgi;
  default_type application/octet-stream;
  server {
    listen 127.0.0.1:$ngx_port;
    root $www;
  }
}
EOF
"$nginx_bin" -p "$ngx" -c "$ngx/nginx.conf" -e "$ngx/logs/error.log" &
pids+=($!)
wait_port "$ngx_port"
ngx_url="http://127.0.0.1:$ngx_port"

# wrk_rate URL [HEADER...]: prints "requests/s MB/s"; fails on any non-2xx
# answer or a connect, read or write error. Requests still unanswered after
# 30 s are wrk's timeouts, counted apart (a loaded machine has them).
wrk_rate() {
  local url=$1 out args=()
  shift
  for h in "$@"; do args+=(-H "$h"); done
  out=$(wrk -t "$threads" -c "$conns" -d "${wrk_seconds}s" --timeout 30s "${args[@]}" "$url")
  if grep -q -E 'Non-2xx|Socket errors: connect [1-9]|read [1-9]|write [1-9]' <<<"$out"; then
    echo "bench: wrk $url: $out" >&2
    exit 1
  fi
  local late
  late=$(grep -o 'timeout [0-9]*' <<<"$out" | cut -d' ' -f2)
  [ "${late:-0}" -eq 0 ] || echo "bench: wrk $url: $late requests unanswered after 30 s" >&2
  awk '/^Requests\/sec/ {r=$2} /^Transfer\/sec/ {t=$2; u=t; sub(/[0-9.]+/, "", u); sub(/[A-Za-z]+$/, "", t);
       m = (u=="GB") ? 1024 : (u=="MB") ? 1 : (u=="KB") ? 1/1024 : 1/1048576; printf "%.0f %.1f\n", r, t*m}' <<<"$out"
}

declare -A rate
serve_round() {
  rate[ngx_file]+="$(wrk_rate "$ngx_url/file.parquet")|"
  rate[fc_file]+="$(wrk_rate "$vurl/files/$file_id" "$auth")|"
  rate[ngx_sum]+="$(wrk_rate "$ngx_url/summary.json")|"
  rate[fc_sum]+="$(wrk_rate "$vurl/summary" "$auth")|"
  rate[ngx_gz]+="$(wrk_rate "$ngx_url/summary.json.gz")|"
  rate[fc_gz]+="$(wrk_rate "$vurl/summary" "$auth" 'Accept-Encoding: gzip')|"
}
serve_rounds=${BENCH_SERVE_ROUNDS:-$(( rounds < 3 ? rounds : 3 ))}
for r in $(seq "$serve_rounds"); do serve_round; done
# med KEY FIELD: median of the rounds' FIELD (1: requests/s, 2: MB/s)
med() { local IFS='|' xs=() v; for v in ${rate[$1]}; do xs+=("$(cut -d' ' -f"$2" <<<"$v")"); done; median "${xs[@]}"; }
ratio() { echo "scale=2; $1 / $2" | bc; }

fc=$(median "${flowcat_s[@]}"); dk=$(median "${duck_s[@]}")
hwm=$(median "${flowcat_hwm[@]}")
hwm_max=$(printf '%s\n' "${flowcat_hwm[@]}" | sort -n | tail -1)
cat <<EOF

flowcat bench: $rows events ($csv_mb MB CSV), $rounds interleaved rounds, medians
machine: $(nproc) cores, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2- | sed 's/^ //'), $(awk '/MemTotal/ {printf "%.1f GiB", $2/1048576}' /proc/meminfo), load average at the end $(cut -d' ' -f1-3 /proc/loadavg)

| measure | flowcat | peer | flowcat / peer |
|---|---|---|---|
| ingest, whole process (s; runs: ${flowcat_s[*]} / ${duck_s[*]}) | $fc | DuckDB CSV to zstd Parquet $dk | $(ratio "$fc" "$dk") (time; goal <= 2) |
| server peak memory, VmHWM (MiB; runs: ${flowcat_hwm[*]} kB) | $(echo "scale=1; $hwm / 1024" | bc) (max $(echo "scale=1; $hwm_max / 1024" | bc)) | DuckDB maxRSS $(echo "scale=1; $(median "${duck_rss[@]}") / 1024" | bc) | goal <= 256 MiB |
| download $(stat -c %s "$www/file.parquet") B Parquet file (MB/s) | $(med fc_file 2) | nginx $(med ngx_file 2) | $(ratio "$(med fc_file 2)" "$(med ngx_file 2)") (goal >= 0.8) |
| download (requests/s) | $(med fc_file 1) | nginx $(med ngx_file 1) | $(ratio "$(med fc_file 1)" "$(med ngx_file 1)") |
| stored summary, $(stat -c %s "$www/summary.json") B JSON (requests/s) | $(med fc_sum 1) | nginx $(med ngx_sum 1) | $(ratio "$(med fc_sum 1)" "$(med ngx_sum 1)") (goal >= 0.5) |
| stored summary, $(stat -c %s "$www/summary.json.gz") B gzip (requests/s) | $(med fc_gz 1) | nginx $(med ngx_gz 1) | $(ratio "$(med fc_gz 1)" "$(med ngx_gz 1)") (goal >= 0.5) |

wrk: $threads threads, $conns connections, ${wrk_seconds} s a run, $serve_rounds runs of each in turn
EOF
