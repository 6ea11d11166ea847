#!/bin/bash
# Screenshots of the window under Xvfb with SDL's software renderer, one per
# guide and readout, into build/screens/ (look at them: that is their
# purpose).  Checks that each is a real picture of the window's size, that
# each guide changes the picture where it should, and that presenter mode,
# help and the explain panel draw.  Uses the hidden option --screenshot FILE
# (the back buffer read through SDL after --frames N, then the program quits).
#
# The guide screenshots are taken over a still of the demo scene (grabbed
# first, with nothing drawn over it) so that "guide on" and "guide off" differ
# only by the guide; the HUD screenshots run the live demo scene.
set -u
: "${VFCOACH:?VFCOACH must name the vfcoach binary}"
PY=${PYTHON:-/usr/bin/python3}
here=$(cd "$(dirname "$0")" && pwd)
out="$here/../build/screens"
mkdir -p "$out" || exit 1
# one run at a time writes the folder (parallel `make check` runs wait)
exec 9>"$out/.lock"
flock 9
rm -f "$out"/*.png

if ! command -v Xvfb >/dev/null; then
    echo "check_screens: Xvfb is missing (make deps installs xvfb)" >&2
    exit 1
fi
work=$(mktemp -d "${TMPDIR:-/tmp}/vfcoach-screens.XXXXXX") || exit 1
# Xvfb picks a free display and writes its number to fd 3 when ready.
Xvfb -displayfd 3 -screen 0 1600x900x24 -nolisten tcp 3>"$work/display" >/dev/null 2>&1 &
xpid=$!
trap 'kill "$xpid" 2>/dev/null; wait "$xpid" 2>/dev/null; rm -rf "$work"' EXIT
for _ in $(seq 100); do
    [ -s "$work/display" ] && break
    sleep 0.1
done
if [ ! -s "$work/display" ]; then
    echo "check_screens: Xvfb did not start" >&2
    exit 1
fi
export DISPLAY=":$(head -n1 "$work/display")"
unset WAYLAND_DISPLAY SDL_VIDEODRIVER SDL_RENDER_DRIVER
export HOME="$work" # snapshots and user dirs stay in the scratch folder

fail=0
shot() { # name frames args...
    local name=$1 frames=$2
    shift 2
    if ! timeout 60 "$VFCOACH" --frames "$frames" --screenshot "$out/$name.png" "$@" \
        >"$work/$name.log" 2>&1; then
        echo "check_screens: $name: vfcoach failed:" >&2
        tail -n 3 "$work/$name.log" >&2
        fail=1
    fi
    if [ ! -s "$out/$name.png" ]; then
        echo "check_screens: $name: no screenshot written" >&2
        fail=1
    fi
}

# 1. the still: the demo scene at 1920x1080 with nothing drawn over it
shot 00-scene 20 --source demo --size 1920x1080 --show none
[ -s "$out/00-scene.png" ] || exit 1
still="$work/scene.png"
cp "$out/00-scene.png" "$still"

# 2. each guide alone over the still
guides="thirds phi diagonals spiral:0 spiral:1 spiral:2 spiral:3 centre horizon
        crop:1:1 crop:4:5 crop:3:2 crop:16:9 zebras peaking subject"
for g in $guides; do
    shot "guide-${g//:/-}" 12 --source "$still" --show "$g"
done
shot guide-none 12 --source "$still" --show none

# 3. readouts and modes on the live demo scene
shot hud-default 60 --source demo --size 1920x1080
shot hud-histogram 30 --source demo --size 1920x1080 --show thirds,meter,hints,histogram,stats
shot hud-histogram-rgb 30 --source demo --size 1920x1080 --show meter,histogram-rgb,label,stats
shot hud-explain 45 --source demo --size 1920x1080 --show thirds,meter,explain,label
shot hud-help 15 --source demo --size 1920x1080 --show thirds,help
shot hud-tabletop 60 --source demo:tabletop --size 1920x1080 --profile product --show thirds,subject,meter,hints,label,explain
shot hud-zebras-peaking 30 --source demo --size 1920x1080 --show zebras,peaking,meter
shot hud-presenter 30 --source demo --size 1920x1080 --presenter --show spiral:2,meter,hints
shot hud-mirror 30 --source demo --size 1920x1080 --mirror --show thirds,horizon,subject,label
shot hud-stills-640 20 --source "$still" --size 640x480 --show thirds,horizon,subject,meter,hints,label

# 4. the pictures themselves
"$PY" - "$out" <<'EOF' || fail=1
import glob, os, sys
import cv2, numpy as np
out = sys.argv[1]
bad = []
def load(n):
    im = cv2.imread(os.path.join(out, n + ".png"))
    if im is None:
        bad.append(n + ": cannot be read")
    return im
files = sorted(glob.glob(os.path.join(out, "*.png")))
for f in files:
    n = os.path.basename(f)[:-4]
    im = cv2.imread(f)
    if im is None:
        bad.append(n + ": not a PNG"); continue
    h, w = im.shape[:2]
    want = (900, 1600) if n == "hud-presenter" else (720, 1280)
    if (h, w) != want:
        bad.append("%s: %dx%d, want %dx%d" % (n, w, h, want[1], want[0]))
    if im.std() < 10:
        bad.append("%s: nearly uniform (std %.1f)" % (n, im.std()))
base = load("guide-none")
scene = load("00-scene")
if base is not None and scene is not None:
    # the still shown again is the scene, pixel for pixel up to resampling
    d = np.abs(base.astype(int) - scene.astype(int)).max(axis=2)
    if (d > 24).mean() > 0.01:
        bad.append("guide-none differs from the scene it shows (%.2f%%)" % (100 * (d > 24).mean()))
# a guide must change at least this many pixels, and where it should
need = {"thirds": 6000, "phi": 6000, "diagonals": 5000, "centre": 150, "horizon": 1000,
        "crop-1-1": 100000, "crop-4-5": 100000, "crop-3-2": 30000, "crop-16-9": 0,
        "subject": 200, "zebras": 0, "peaking": 500}
for g, k in list(need.items()) + [("spiral-%d" % i, 3000) for i in range(4)]:
    im = load("guide-" + g)
    if im is None or base is None:
        continue
    ch = np.abs(im.astype(int) - base.astype(int)).max(axis=2) > 24
    if ch.sum() < k:
        bad.append("guide %s: only %d pixels changed, want >= %d" % (g, ch.sum(), k))
    if g == "thirds":  # rule of thirds: columns 1/3 and 2/3 (common practice)
        cols = np.where(ch[360 // 6 * 1] )[0]
        for c in (1280 / 3, 2 * 1280 / 3):
            if not np.any(np.abs(cols - c) <= 1.5):
                bad.append("guide thirds: no line near column %.1f" % c)
    if g == "crop-16-9" and ch.sum() > 2000:
        bad.append("guide crop-16-9 darkens a 16:9 frame (%d px)" % ch.sum())
# the four spiral orientations differ from each other
sp = [load("guide-spiral-%d" % i) for i in range(4)]
if all(s is not None for s in sp):
    for i in range(4):
        for j in range(i + 1, 4):
            if np.array_equal(sp[i], sp[j]):
                bad.append("spiral orientations %d and %d look the same" % (i, j))
for b in bad:
    print("check_screens:", b, file=sys.stderr)
print("check_screens: %d screenshots in %s, %d problems" % (len(files), out, len(bad)))
sys.exit(1 if bad else 0)
EOF
exit $fail
