#!/bin/bash
# Accuracy report of the composition analysis over the demo scenes (harbour
# and tabletop, 640x480 and 1920x1080) against the ground truth each demo
# frame carries; fails past the issue's bounds (see tests/accuracy_report.py).
set -u
: "${VFCOACH:?VFCOACH must name the vfcoach binary}"
PY=${PYTHON:-/usr/bin/python3}
exec "$PY" "$(dirname "$0")/accuracy_report.py" "$VFCOACH" "${ACCURACY_FRAMES:-90}"
