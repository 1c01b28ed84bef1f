#!/bin/sh
# The flowcat image's entry point. With no arguments it serves the data
# directory FLOWCAT_DATA (default /data) on FLOWCAT_ADDR (default
# 0.0.0.0:8470). Before `serve` it initializes the directory (serve's
# --data, else FLOWCAT_DATA) when it holds
# no catalog yet (an empty volume), so the image starts by itself:
#   - the master key is the one given by FLOWCAT_MASTER_KEY (64 hex digits)
#     or FLOWCAT_MASTER_KEY_FILE, which init and serve both honour; without
#     either, init writes DIR/master.key (move it out for production);
#   - FLOWCAT_BLOBS=s3://BUCKET/PREFIX keeps snapshot files in an
#     S3-compatible store (endpoint and keys from the AWS_* variables).
# Any other command runs as `flowcat ARGS...`.
set -eu

data="${FLOWCAT_DATA:-/data}"
if [ "$#" -eq 0 ]; then
	set -- serve --data "$data" --addr "${FLOWCAT_ADDR:-0.0.0.0:8470}"
fi

if [ "$1" = serve ]; then
	# serve's own --data, when given, names the directory.
	prev=""
	for a in "$@"; do
		case "$a" in
		--data=*) data="${a#--data=}" ;;
		*) [ "$prev" = --data ] && data="$a" ;;
		esac
		prev="$a"
	done
	if [ ! -e "$data/instance.json" ] && [ ! -e "$data/catalog.db" ]; then
		echo "flowcat-entrypoint: $data holds no catalog; initializing it" >&2
		if [ -n "${FLOWCAT_BLOBS:-}" ]; then
			flowcat init --data "$data" --blobs "$FLOWCAT_BLOBS" >&2
		else
			flowcat init --data "$data" >&2
		fi
	fi
fi

exec flowcat "$@"
