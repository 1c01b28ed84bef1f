#!/usr/bin/env bash
# The steps every golden data directory is made by: run as ./make.sh from
# that directory (which calls this with the flowcat binary to use), with its
# source/day1.csv and source/day2.csv. See each directory's README.md.
set -euo pipefail
bin="$1"
rm -rf data
"$bin" init --data data
"$bin" serve --data data --addr 127.0.0.1:18471 >serve.log 2>&1 &
pid=$!
trap 'kill $pid 2>/dev/null || true' EXIT
for _ in $(seq 50); do curl -fs http://127.0.0.1:18471/api/v1/health >/dev/null && break; sleep 0.1; done
export FLOWCAT_SERVER=http://127.0.0.1:18471
export FLOWCAT_TOKEN=$("$bin" token issue --data data --role admin --subject golden-maker)
"$bin" project create golden --title "Golden data directory (invented data)"
"$bin" dataset create golden/visits
"$bin" upload --quiet golden/visits source/day1.csv
"$bin" upload --quiet golden/visits source/day2.csv
"$bin" versions golden/visits
# The manifests as this release serves them (their sha256 is each snapshot id).
mkdir -p served
for v in 1 2; do
  curl -fs -H "Authorization: Bearer $FLOWCAT_TOKEN" \
    "$FLOWCAT_SERVER/api/v1/projects/golden/datasets/visits/versions/$v/manifest" >served/manifest-$v.json
done
kill -INT $pid
wait $pid || true
trap - EXIT
rm -rf data/tmp serve.log
