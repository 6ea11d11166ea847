#!/bin/sh
# Runs inside the qemu guest (busybox sh, no udev daemon), against the
# kernel's vivid virtual camera.  Prints one PASS or FAIL line per check;
# tests/vm/run.sh counts them.  Every wait is bounded.
VF=/usr/bin/vfcoach
T=/tmp

now() { cut -d' ' -f1 /proc/uptime; }
since() { awk -v a="$1" -v b="$(now)" 'BEGIN{printf "%.1f", b-a}'; }
pass() { echo "PASS $*"; }
fail() { echo "FAIL $*"; }
nlines() { awk '/^\{/{n++} END{print n+0}' "$1" 2>/dev/null || echo 0; }
# jnum KEY FILE: the values of a numeric JSON key, one per line
jnum() { grep -o "\"$1\":[-0-9.e+]*" "$2" | cut -d: -f2; }
mean() { awk '{s+=$1; n++} END{if(n) printf "%.4f", s/n; else print "nan"}'; }
# wait_for CMD-TEST SECONDS: polls a shell test every 0.1 s
wait_until() {
    _deadline=$(awk -v a="$(now)" -v s="$2" 'BEGIN{print a+s}')
    while ! eval "$1"; do
        awk -v a="$(now)" -v d="$_deadline" 'BEGIN{exit !(a>d)}' && return 1
        usleep 100000
    done
    return 0
}

echo "guest: kernel $(uname -r), $(grep -c ^processor /proc/cpuinfo) cpu"

# ---- --list ----------------------------------------------------------------
check_list() {
    t0=$(now)
    $VF --list > $T/list.txt 2> $T/list.err
    rc=$?
    ok=1
    for want in /dev/video0 /dev/video8 '"vivid"' YUYV NV12 RGB3 640x480 multi-planar; do
        grep -q -- "$want" $T/list.txt || { ok=0; echo "  --list lacks $want"; }
    done
    # the multi-planar note belongs to /dev/video8, not /dev/video0
    awk '/^\/dev\/video0/{v=1} /^\/dev\/video8/{v=0} v && /multi-planar/{exit 1}' $T/list.txt || { ok=0; echo "  video0 called multi-planar"; }
    for nope in /dev/video1 /dev/video2 /dev/video3; do  # output and metadata nodes
        grep -q "^$nope" $T/list.txt && { ok=0; echo "  --list shows non-capture node $nope"; }
    done
    if [ $rc = 0 ] && [ $ok = 1 ] && [ ! -s $T/list.err ]; then
        pass "list: /dev/video0 (single-planar) and /dev/video8 (multi-planar) with YUYV, NV12, RGB3 and 640x480; output/metadata nodes skipped ($(since $t0) s)"
    else
        fail "list: rc=$rc"; head -n 30 $T/list.txt; cat $T/list.err
    fi
}

# ---- headless capture in one pixel format ----------------------------------
# The capture thread takes every frame the driver gives (25 fps) while the
# analysis, slow under TCG, takes the newest one each time it is free; so a
# run lasts until the frame counter (seq, from 0) passes 100 frames captured,
# and every analysed frame's measurements are checked.
last_seq() { jnum seq "$1" | tail -n1; }
# capture_start MODE NODE LABEL FOURCC: 640x480, 25 fps, in the background
capture_start() {
    f=$T/cap-$1-$3.jsonl
    echo "$(now)" > $f.t0
    ( exec $VF --headless --device "$2@$4" --size 640x480 --fps 25 > $f 2> $f.err ) &
    echo $! > $f.pid
}
# capture_finish MODE LABEL: once 100 frames are captured, stop it with SIGINT
capture_finish() {
    f=$T/cap-$1-$2.jsonl
    wait_until '[ "$(last_seq $f)" -ge 99 ] 2>/dev/null' 60
    pid=$(cat $f.pid)
    kill -INT $pid 2>/dev/null
    wait $pid
    echo $? > $f.rc
    echo "$(now)" > $f.t1
}
# capture_check MODE LABEL
capture_check() {
    f=$T/cap-$1-$2.jsonl
    rc=$(cat $f.rc)
    el=$(awk -v a="$(cat $f.t0)" -v b="$(cat $f.t1)" 'BEGIN{printf "%.1f", b-a}')
    n=$(nlines $f)
    jnum width $f > $T/w; jnum height $f > $T/h; jnum seq $f > $T/s; jnum t_capture $f > $T/t
    sizes=$(paste -d x $T/w $T/h | sort -u | tr '\n' ' ')
    ev=$(jnum exposure_ev $f | mean)
    col=$(jnum colourfulness $f | mean)
    # Driver timestamps: increasing with seq, on the guest's CLOCK_MONOTONIC
    # (inside the run's /proc/uptime window), and spaced by 25 fps: a mean
    # frame period near 0.04 s: down to 0.036 (vivid catches up after a
    # stall with frames closer together; 30 fps would be 0.033) and up to
    # 0.1 s when a starved guest makes it skip frames (its 5 fps default
    # would show 0.2 s).
    per=$(paste -d' ' $T/s $T/t | awk -v a="$(cat $f.t0)" -v b="$(cat $f.t1)" '
        NR==1{s0=$1;t0=$2; if ($2 < a-0.5) bad=1} {s=$1;t=$2; if (NR>1 && (t<=pt||s<=ps)) bad=1; pt=t; ps=s}
        END{if (t > b+0.5) bad=1; if (bad||s==s0) print "nan"; else printf "%.4f", (t-t0)/(s-s0)}')
    eval "EV_$1_$2=$ev COL_$1_$2=$col"
    seq=$(last_seq $f)
    if [ "$rc" = 0 ] && [ "${seq:-0}" -ge 99 ] && [ "$n" -ge 5 ] && [ "$sizes" = "640x480 " ] &&
       awk -v p="$per" -v e="$ev" -v c="$col" 'BEGIN{exit !(p>0.036 && p<0.1 && e>-3 && e<3 && c>10)}'; then
        pass "capture $1 $2: $((seq + 1)) frames captured at 640x480, $n analysed; driver timestamps monotonic, mean ${per} s a frame (25 fps: 0.04), exposure_ev=$ev colourfulness=$col, ${el} s"
    else
        fail "capture $1 $2: rc=$rc captured=$((${seq:-0} + 1)) analysed=$n sizes='$sizes' period=$per ev=$ev col=$col (${el} s)"
        head -c 600 $f.err
    fi
}

# The same scene in three pixel formats must measure the same: this is what
# proves the driver's colour information (matrix, range) is honoured.
same_scene() { # MODE
    eval "a=\$EV_$1_YUYV b=\$EV_$1_NV12 c=\$EV_$1_RGB24 x=\$COL_$1_YUYV y=\$COL_$1_NV12 z=\$COL_$1_RGB24"
    if awk -v a="$a" -v b="$b" -v c="$c" -v x="$x" -v y="$y" -v z="$z" '
        function ab(v) { return v < 0 ? -v : v }
        BEGIN { exit !(ab(a-c) < 0.1 && ab(b-c) < 0.1 && ab(x-z) < 0.1*z && ab(y-z) < 0.1*z) }'; then
        pass "formats agree ($1): exposure_ev YUYV $a NV12 $b RGB24 $c; colourfulness $x $y $z"
    else
        fail "formats disagree ($1): exposure_ev YUYV $a NV12 $b RGB24 $c; colourfulness $x $y $z"
    fi
}

# ---- bad devices: one line, non-zero exit ---------------------------------
# bad LABEL EXPECTED-TEXT COMMAND...
bad() {
    label=$1; want=$2; shift 2
    "$@" --headless --frames 5 > /dev/null 2> $T/bad.err
    rc=$?
    nl=$(grep -c . $T/bad.err)
    if [ $rc != 0 ] && [ "$nl" = 1 ] && grep -q -- "$want" $T/bad.err; then
        pass "bad device $label: exit $rc, one line: $(cat $T/bad.err)"
    else
        fail "bad device $label: exit $rc, $nl lines (wanted one with '$want'):"; cat $T/bad.err
    fi
}

as_nobody() { su -s /bin/sh nobody -c "$*"; }

# ---- live run with unplug and replug -----------------------------------------
live_start() {
    L=$T/live-$MODE.jsonl
    $VF --headless --device $1 --size 640x480 --fps 25 > $L 2> $L.err &
    LPID=$!
    wait_until '[ "$(nlines $L)" -ge 10 ]' 30 || { fail "live run ($MODE) did not start"; cat $L.err; return 1; }
}
fds() { ls /proc/$LPID/fd | wc -l; }
maps() { grep -c '/dev/video' /proc/$LPID/maps; }

cycles() {
    count=$1
    fd0=$(fds); map0=$(maps); lost0=$(grep -c 'waiting for the same camera' $L.err); back0=$(grep -c 'camera back' $L.err)
    t0=$(now)
    ok=0
    for i in $(seq 1 $count); do
        b=$(grep -c 'camera back' $L.err)
        v4l2-ctl -d $2 -c disconnect=1 || { echo "  v4l2-ctl disconnect failed"; break; }
        wait_until '[ "$(grep -c "camera back" $L.err)" -gt $b ]' 15 || { echo "  cycle $i: not back"; break; }
        n=$(nlines $L)
        wait_until '[ "$(nlines $L)" -gt $n ]' 15 || { echo "  cycle $i: no frames after the replug"; break; }
        kill -0 $LPID 2>/dev/null || { echo "  cycle $i: vfcoach exited"; break; }
        ok=$i
    done
    el=$(since $t0)
    fd1=$(fds); map1=$(maps)
    lost=$(( $(grep -c 'waiting for the same camera' $L.err) - lost0 ))
    back=$(( $(grep -c 'camera back' $L.err) - back0 ))
    # Every cycle must end in a "back" line; "lost" lines may be fewer, as the
    # program reports only the newest state when both arrive before it looks.
    if [ $ok = $count ] && [ "$fd0" = "$fd1" ] && [ "$map0" = "$map1" ] && [ $lost -ge 1 ] && [ $back = $count ]; then
        pass "unplug/replug ($MODE, vivid disconnect): $ok cycles survived in ${el} s; open fds $fd0 before, $fd1 after; buffer mappings $map0/$map1; $lost 'lost' and $back 'back' lines"
    else
        fail "unplug/replug ($MODE): $ok of $count cycles; fds $fd0 -> $fd1; mappings $map0 -> $map1; lost lines $lost back lines $back (${el} s)"
        tail -n 5 $L.err
    fi
}

# A USB unplug removes the node; the camera may come back under another number.
module_replug() {
    fd0=$(fds); map0=$(maps)
    n=$(nlines $L)
    t0=$(now)
    echo vivid.0 > /sys/bus/platform/drivers/vivid/unbind
    wait_until '[ ! -e /dev/video0 ]' 5 || echo "  /dev/video0 still there after unbind"
    # vfcoach must let go of the node before the module can go.
    wait_until 'rmmod vivid 2>/dev/null' 10 || echo "  rmmod vivid kept failing (a descriptor still open?)"
    modprobe vivid $VIVID vid_cap_nr=5,8
    wait_until '[ "$(nlines $L)" -ge $((n + 5)) ]' 20
    el=$(since $t0)
    fd1=$(fds); map1=$(maps)
    if [ "$(nlines $L)" -ge $((n + 5)) ] && [ -e /dev/video5 ] && [ "$fd0" = "$fd1" ] &&
       [ "$map0" = "$map1" ] && grep -q 'video5).*camera back (it was' $L.err; then
        pass "unplug/replug ($MODE, module removed and reloaded): back as /dev/video5 in ${el} s; fds $fd0/$fd1; $(grep 'camera back (it was' $L.err | tail -n1)"
    else
        fail "module replug ($MODE): frames $n -> $(nlines $L), nodes: $(ls /dev/video* | tr '\n' ' '); fds $fd0 -> $fd1; mappings $map0 -> $map1"
        tail -n 5 $L.err
    fi
}

live_stop() {
    t0=$(now)
    kill -INT $LPID
    wait_until '! kill -0 $LPID 2>/dev/null' 10 && pass "stop ($MODE): vfcoach ended $(since $t0) s after SIGINT" ||
        { fail "stop ($MODE): vfcoach still running 10 s after SIGINT"; kill -9 $LPID; }
    wait $LPID 2>/dev/null
}

reload() { # module parameters
    rmmod vivid 2>/dev/null
    modprobe vivid "$@" || fail "modprobe vivid $*"
    wait_until '[ -e /dev/video0 ] && [ -e /dev/video8 ]' 5 || fail "no /dev/video0 and video8 after modprobe vivid $*"
}

# ==== two vivid instances: /dev/video0 single-planar, /dev/video8 multi-planar
# (through libv4l2's plugin); captures in both run side by side.
SP=/dev/video0
MP=/dev/video8
VIVID="n_devs=2 multiplanar=1,2"
reload $VIVID vid_cap_nr=0,8
check_list
# a camera this user may not open is still listed, with the reason and the fix
as_nobody "$VF --list" > $T/list-nobody.txt 2>&1
if [ $? = 0 ] && grep -q '^/dev/video0$' $T/list-nobody.txt &&
   grep -q 'cannot open: permission denied.*video.*group' $T/list-nobody.txt; then
    pass "list as uid 65534: /dev/video0 listed as not openable: permission denied, with the video group and udev rule hint"
else
    fail "list as uid 65534"; head -n 8 $T/list-nobody.txt
fi
for fmt in YUYV:YUYV NV12:NV12 RGB24:RGB3; do
    capture_start single $SP ${fmt%%:*} ${fmt##*:}
    capture_start multiplanar $MP ${fmt%%:*} ${fmt##*:}
    capture_finish single ${fmt%%:*}
    capture_finish multiplanar ${fmt%%:*}
    capture_check single ${fmt%%:*}
    capture_check multiplanar ${fmt%%:*}
done
same_scene single
same_scene multiplanar

bad "no such node" "no such device" $VF --device /dev/video9
bad "/dev/null" "not a V4L2 video device" $VF --device /dev/null
bad "a directory" "is a directory" $VF --device /tmp
bad "output node /dev/video1" "without video capture" $VF --device /dev/video1
bad "metadata node /dev/video2" "without video capture (metadata)" $VF --device /dev/video2
bad "unknown name" "no camera by that" $VF --device "Studio Cam 9"
bad "permission denied (uid 65534)" "permission denied" as_nobody $VF --device $SP
bad "pixel format not offered" "does not offer the pixel format" $VF --device $SP@ZZZZ

MODE=single
live_start $SP && {
    bad "busy (another vfcoach streams)" "busy" $VF --device $SP
    # default camera: no --device, first capture node (busy here, so its error shows, not the demo)
    bad "default camera while busy" "/dev/video0: cannot set the format: busy" $VF
    cycles 20 $SP
    module_replug
    live_stop
}
reload $VIVID vid_cap_nr=0,8
MODE=multiplanar
live_start $MP && {
    cycles 2 $MP
    live_stop
}

# default camera when free: the first capture node; and a camera by its card name
timeout 60 $VF --headless --frames 3 --size 640x480 --fps 25 > $T/def.jsonl 2> $T/def.err
[ $? = 0 ] && [ "$(nlines $T/def.jsonl)" -ge 3 ] && pass "default camera: no --device streams /dev/video0" ||
    { fail "default camera"; cat $T/def.err; }
timeout 60 $VF --headless --frames 3 --source vivid --size 640x480 --fps 25 > $T/name.jsonl 2> $T/name.err
[ $? = 0 ] && [ "$(nlines $T/name.jsonl)" -ge 3 ] && pass "camera by card name: --source vivid streams" ||
    { fail "camera by card name"; cat $T/name.err; }
# a stable link as udev would make it (no udev daemon here, so by hand)
mkdir -p /dev/v4l/by-path && ln -sf /dev/video0 /dev/v4l/by-path/platform-vivid.0-video-index0
timeout 60 $VF --headless --frames 3 --device /dev/v4l/by-path/platform-vivid.0-video-index0 --size 640x480 --fps 25 \
    > $T/link.jsonl 2> $T/link.err
[ $? = 0 ] && [ "$(nlines $T/link.jsonl)" -ge 3 ] && pass "camera by stable link: --device /dev/v4l/by-path/... streams" ||
    { fail "camera by stable link"; cat $T/link.err; }
echo "guest: done"
