#!/usr/bin/env bash
# Set up the environment (first run only) and run chimeline on the embedded synthetic demo scan.
SYSTEM_PACKAGES="libusb-1.0-0"
source "$(dirname "$0")/_env.sh"
exec "$VENV/bin/chimeline" demo "$@"
