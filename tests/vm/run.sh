#!/bin/bash
# Real-driver check: boots Debian's own kernel under qemu (TCG, no KVM: the
# machines' /dev/kvm cannot run this guest), loads the kernel's vivid virtual
# camera driver and runs the vfcoach binary against it inside the guest.
#
#   tests/vm/run.sh /abs/path/to/vfcoach
#
# Nothing is installed on the host: the kernel package is downloaded with
# apt-get download and only vmlinuz and the media modules are unpacked, into
# build/vm/ (kept as a cache between runs).  The guest is a busybox-static
# initramfs holding the program, the shared libraries it loads (libv4l2 is
# linked dynamically so that its multi-planar plugin can be loaded), v4l2-ctl,
# and tests/vm/guest.sh, which prints PASS/FAIL lines on the second serial port.
# The verdict comes from those lines, never from qemu's exit status.
set -u

PROG=${1:?usage: tests/vm/run.sh /abs/path/to/vfcoach}
HERE=$(cd "$(dirname "$0")" && pwd)
ROOT=$(cd "$HERE/../.." && pwd)
CACHE=${VM_CACHE:-$ROOT/build/vm}
TIMEOUT=${VM_TIMEOUT:-170}     # seconds of qemu time at most (the whole check must stay under 3 min)
T0=$(date +%s.%N)

say() { printf 'check-vm: %s\n' "$*"; }
die() { printf 'check-vm: FAIL: %s\n' "$*" >&2; exit 1; }
elapsed() { awk -v a="$T0" -v b="$(date +%s.%N)" 'BEGIN{printf "%.1f", b-a}'; }

[ -x "$PROG" ] || die "$PROG: not an executable file"
for t in qemu-system-x86_64 busybox v4l2-ctl depmod modprobe cpio dpkg-deb apt-get; do
    command -v "$t" >/dev/null || die "$t not found (make deps installs it)"
done
mkdir -p "$CACHE" || die "$CACHE: cannot create"

# ---- kernel: Debian's current one, vmlinuz + media modules only ----------
kver() { apt-cache depends linux-image-amd64 2>/dev/null | sed -n 's/.*Depends: linux-image-\(.*-amd64\)$/\1/p' | head -n1; }
KVER=$(kver)
if [ -z "$KVER" ]; then
    apt-get update -q >/dev/null 2>&1
    KVER=$(kver)
fi
if [ -z "$KVER" ]; then
    # No package lists (offline): fall back to a kernel cached by an earlier run.
    KVER=$(ls "$CACHE" 2>/dev/null | sed -n 's/^kernel-//p' | sort -V | tail -n1)
fi
[ -n "$KVER" ] || die "cannot tell which kernel linux-image-amd64 depends on (apt-get update?)"
KDIR=$CACHE/kernel-$KVER
if [ ! -f "$KDIR/ok" ]; then
    say "fetching linux-image-$KVER (kept in $KDIR)"
    rm -rf "$KDIR" && mkdir -p "$KDIR/dl" "$KDIR/root" || die "$KDIR: cannot create"
    ( cd "$KDIR/dl" && apt-get download "linux-image-$KVER" >/dev/null 2>&1 ) ||
        { apt-get update -q >/dev/null 2>&1; ( cd "$KDIR/dl" && apt-get download "linux-image-$KVER" >/dev/null 2>&1 ); } ||
        die "apt-get download linux-image-$KVER failed"
    dpkg-deb --fsys-tarfile "$KDIR"/dl/linux-image-*.deb |
        tar -x -C "$KDIR/root" --wildcards './boot/vmlinuz-*' './lib/modules/*/modules.*' \
            './lib/modules/*/kernel/drivers/media' || die "unpacking the kernel package failed"
    depmod -b "$KDIR/root" "$KVER" || die "depmod failed"
    rm -rf "$KDIR/dl"
    touch "$KDIR/ok"
fi
VMLINUZ=$KDIR/root/boot/vmlinuz-$KVER
[ -f "$VMLINUZ" ] || die "$VMLINUZ missing"

# ---- initramfs ------------------------------------------------------------
IRD=$CACHE/initramfs
rm -rf "$IRD" && mkdir -p "$IRD"/{bin,sbin,dev,proc,sys,tmp,etc,run,usr/bin} || die "$IRD: cannot create"
cp /bin/busybox "$IRD/bin/busybox"
for a in sh su usleep timeout uptime paste mount mkdir cat ls wc sleep grep sed awk head tail tr cut kill poweroff \
         modprobe rmmod insmod lsmod echo printf test seq date sort uniq rm dmesg readlink md5sum; do
    ln -sf busybox "$IRD/bin/$a"
done
printf 'root:x:0:0:root:/root:/bin/sh\nnobody:x:65534:65534:nobody:/nonexistent:/bin/sh\n' > "$IRD/etc/passwd"
printf 'root:x:0:\nvideo:x:44:\nnogroup:x:65534:\n' > "$IRD/etc/group"

# vivid and the modules it needs, as modprobe on the host resolves them
MODS=$(modprobe -d "$KDIR/root" -S "$KVER" --show-depends vivid | awk '$1=="insmod"{print $2}')
[ -n "$MODS" ] || die "modprobe --show-depends vivid found nothing"
for m in $MODS; do
    rel=${m#"$KDIR/root"}
    mkdir -p "$IRD$(dirname "$rel")" && cp "$m" "$IRD$rel"
done
depmod -b "$IRD" "$KVER" || die "depmod (initramfs) failed"

# Shared-library closure of the program, v4l2-ctl and libv4l's plugins.
copy_with_libs() { # file...
    local f l
    for f in "$@"; do
        mkdir -p "$IRD$(dirname "$f")" && cp -L "$f" "$IRD$f"
        for l in $(ldd "$f" 2>/dev/null | awk '/=>/ && $3 ~ /^\// {print $3} $1 ~ /^\// {print $1}'); do
            [ -e "$IRD$l" ] && continue
            mkdir -p "$IRD$(dirname "$l")" && cp -L "$l" "$IRD$l"
        done
    done
}
LIBV4L=/usr/lib/x86_64-linux-gnu/libv4l
copy_with_libs "$(command -v v4l2-ctl)" $(find "$LIBV4L" -name '*.so' 2>/dev/null)
cp "$PROG" "$IRD/usr/bin/vfcoach" || die "copying $PROG failed"
copy_with_libs "$IRD/usr/bin/vfcoach"
# ldd ran on the copy, so its own path got copied to itself: nothing to undo.
ldd "$PROG" | grep -q 'libv4l2.so' || die "$PROG does not link libv4l2 dynamically (its multi-planar plugin would not load)"
mkdir -p "$IRD/lib64" && cp -L /lib64/ld-linux-x86-64.so.2 "$IRD/lib64/"

cp "${VM_GUEST:-$HERE/guest.sh}" "$IRD/guest.sh"   # VM_GUEST: another script, for trying things out
cat > "$IRD/init" <<'EOF'
#!/bin/sh
mount -t proc proc /proc
mount -t sysfs sysfs /sys
mount -t devtmpfs devtmpfs /dev
mkdir -p /dev/shm && mount -t tmpfs tmpfs /dev/shm
mount -t tmpfs tmpfs /tmp
export PATH=/usr/bin:/bin:/sbin HOME=/root
sh /guest.sh > /dev/ttyS1 2>&1
echo "GUEST-END" > /dev/ttyS1
poweroff -f
EOF
chmod +x "$IRD/init" "$IRD/guest.sh"
( cd "$IRD" && find . | cpio -o -H newc --quiet ) > "$CACHE/initramfs.cpio" || die "cpio failed"
say "initramfs $(du -m "$CACHE/initramfs.cpio" | cut -f1) MiB, kernel $KVER, prepared in $(elapsed) s"

# ---- boot -----------------------------------------------------------------
OUT=$CACHE/guest.log
KLOG=$CACHE/kernel.log
rm -f "$OUT" "$KLOG"
TQ=$(date +%s.%N)
timeout --kill-after=5 "$TIMEOUT" qemu-system-x86_64 -accel tcg${VM_TCG_OPTS:-} -cpu ${VM_CPU:-max} -m 1024 -smp ${VM_SMP:-2} \
    -kernel "$VMLINUZ" -initrd "$CACHE/initramfs.cpio" \
    -append "console=ttyS0 panic=-1 loglevel=4 rdinit=/init" \
    -display none -monitor none -nic none -no-reboot \
    -serial "file:$KLOG" -serial "file:$OUT" </dev/null
QRC=$?
QT=$(awk -v a="$TQ" -v b="$(date +%s.%N)" 'BEGIN{printf "%.1f", b-a}')
[ -f "$OUT" ] && sed -i 's/\r$//' "$OUT"
[ -f "$OUT" ] && cat "$OUT"
[ $QRC = 124 ] || [ $QRC = 137 ] && say "qemu stopped by the ${TIMEOUT} s timeout"

npass=$(grep -c '^PASS' "$OUT" 2>/dev/null)
nfail=$(grep -c '^FAIL' "$OUT" 2>/dev/null)
say "qemu ran ${QT} s, whole check $(elapsed) s; kernel log: $KLOG"
if ! grep -q '^GUEST-END' "$OUT" 2>/dev/null; then
    say "the guest did not finish; last kernel lines:"; tail -n 20 "$KLOG" 2>/dev/null
    nfail=$((nfail + 1))
fi
echo "check-vm: ${npass:-0} passed, ${nfail:-0} failed"
[ "${nfail:-0}" = 0 ] && [ "${npass:-0}" -gt 0 ]
