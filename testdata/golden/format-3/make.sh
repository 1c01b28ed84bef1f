#!/usr/bin/env bash
# Makes this golden data directory with a flowcat binary of stored format 3
# (see README.md). Run from this folder: ./make.sh /path/to/flowcat
exec "$(dirname "$0")/../make-golden.sh" "$@"
