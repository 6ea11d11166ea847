#!/bin/bash
# Sharpness (variance of the 3x3 Laplacian of 8-bit luma) against OpenCV's
# cv2.Laplacian(img, cv2.CV_64F).var() on scikit-image sample photographs,
# within 1 %; also colourfulness, clip fractions and exposure against numpy
# evaluations of the published formulas.  Fails on any difference beyond
# the tolerance (see tests/laplacian_ref.py).
set -u
: "${VFCOACH:?VFCOACH must name the vfcoach binary}"
PY=${PYTHON:-/usr/bin/python3}
exec "$PY" "$(dirname "$0")/laplacian_ref.py" "$VFCOACH"
