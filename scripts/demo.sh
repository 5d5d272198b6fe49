#!/usr/bin/env bash
# Set up the environment (first run only) and run chimeline on the embedded synthetic demo scan.
source "$(dirname "$0")/_env.sh"
exec "$VENV/bin/chimeline" demo "$@"
