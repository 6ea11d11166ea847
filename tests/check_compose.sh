#!/bin/bash
# Composition analysis against reference libraries (tests/compose_reference.py):
# the Hough peak (horizon and wall edges) against cv2.HoughLines, the saliency map against OpenCV's
# spectral residual (correlation), the level on building.jpg (Debian
# opencv-doc) rotated by known angles, and subject focus against
# cv2.Laplacian.  Uses `vfcoach inspect`.  Non-zero exit on any failure.
set -u
: "${VFCOACH:?VFCOACH must name the vfcoach binary}"
PY=${PYTHON:-/usr/bin/python3}
work=$(mktemp -d "${TMPDIR:-/tmp}/vfcoach-compose.XXXXXX") || exit 1
trap 'rm -rf "$work"' EXIT
"$PY" "$(dirname "$0")/compose_reference.py" "$VFCOACH" "$work"
