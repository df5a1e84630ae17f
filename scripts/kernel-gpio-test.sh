#!/usr/bin/env bash
# The GPIO virtual-machine test (README "Wiring a station"): boots a small
# Linux kernel with gpio-sim under qemu-system-x86_64 (software emulation)
# and runs padline's station check, a type-1 study, 'padline run' over 20
# serials and the GPIO faults against a unit emulator on the far side of the
# simulated lines (fixture/hostpins/internal/gpiovm).
#
#   scripts/kernel-gpio-test.sh               build the kernel if not cached, run the test
#   scripts/kernel-gpio-test.sh --install     apt-get install what is missing first
#   scripts/kernel-gpio-test.sh --build-only  only build (or find) the cached kernel
#   scripts/kernel-gpio-test.sh --no-build    run only with an already cached kernel
#
# The kernel (scripts/kernel-gpio/build-kernel.sh) is built once per machine
# and cached under ~/.cache/padline-kernel; the first build takes about ten
# minutes on two busy cores. Exit 0 only when the guest prints
# "GPIOVM RESULT PASS". The console log is kept in $PADLINE_VM_LOG when set.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
install=0 build_only=0 no_build=0
for a in "$@"; do
	case $a in
	--install) install=1 ;;
	--build-only) build_only=1 ;;
	--no-build) no_build=1 ;;
	*) echo "usage: $0 [--install] [--build-only|--no-build]" >&2; exit 2 ;;
	esac
done

pkgs="linux-source-6.1 qemu-system-x86 busybox-static bc flex bison libelf-dev libssl-dev make gcc xz-utils"
if [ $install = 1 ]; then
	missing=""
	for p in $pkgs; do
		dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q 'install ok installed' || missing="$missing $p"
	done
	if [ -n "$missing" ]; then
		echo "kernel-gpio-test: installing$missing" >&2
		apt-get -o DPkg::Lock::Timeout=600 update -qq && DEBIAN_FRONTEND=noninteractive apt-get -o DPkg::Lock::Timeout=600 install -y -qq $missing >/dev/null
	fi
fi

t0=$(date +%s.%N)
if [ $no_build = 1 ]; then
	kernel=$(bash "$root/scripts/kernel-gpio/build-kernel.sh" --path)
else
	kernel=$(bash "$root/scripts/kernel-gpio/build-kernel.sh")
fi
t1=$(date +%s.%N)
echo "kernel-gpio-test: kernel $kernel ready in $(echo "$t1 - $t0" | bc) s (cold build took $(cat "$(dirname "$kernel")/build-seconds") s)"

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
r=$work/root
mkdir -p "$r/bin" "$r/dev" "$r/proc" "$r/sys" "$r/tmp" "$r/vm"

# padline static: the SQLite driver needs cgo, so glibc is linked statically
# (-extldflags -static); netgo and osusergo keep Go's own DNS and user
# lookups, sqlite_omit_load_extension drops SQLite's dlopen. --build-only
# builds them too, so the Go build cache is warm for the test run.
t4=$(date +%s.%N)
(cd "$root" && CGO_ENABLED=1 go build -tags netgo,osusergo,sqlite_omit_load_extension \
	-ldflags '-extldflags -static' -o "$r/bin/padline" ./cmd/padline)
(cd "$root" && CGO_ENABLED=0 go build -o "$r/bin/gpiovm" ./fixture/hostpins/internal/gpiovm)
echo "kernel-gpio-test: static padline and gpiovm built in $(echo "$(date +%s.%N) - $t4" | bc) s"
[ $build_only = 1 ] && exit 0
command -v qemu-system-x86_64 >/dev/null || { echo "kernel-gpio-test: qemu-system-x86_64 missing (--install)" >&2; exit 1; }
cp "$(command -v busybox)" "$r/bin/busybox"
file "$r/bin/busybox" 2>/dev/null | grep -q 'dynamically' && { echo "kernel-gpio-test: busybox is not static (install busybox-static)" >&2; exit 1; }
cp "$root"/fixture/hostpins/testdata/vm/*.yaml "$r/vm/"
cat >"$r/init" <<'INIT'
#!/bin/busybox sh
/bin/busybox --install -s /bin
mount -t proc proc /proc
mount -t sysfs sys /sys
mount -t devtmpfs dev /dev
mount -t tmpfs tmp /tmp
mount -t configfs configfs /sys/kernel/config
echo "GPIOVM booted: uptime $(cut -d' ' -f1 /proc/uptime) s"
start=$(cut -d' ' -f1 /proc/uptime)
cd /tmp
cmd=run
for w in $(cat /proc/cmdline); do case $w in gpiovm.cmd=*) cmd=${w#gpiovm.cmd=} ;; esac; done
/bin/gpiovm $cmd /vm
echo "GPIOVM exit $? after $(cut -d' ' -f1 /proc/uptime) s uptime (test started at $start s)"
poweroff -f
INIT
chmod +x "$r/init"
(cd "$r" && find . | busybox cpio -o -H newc 2>/dev/null | gzip -1) >"$work/initrd.gz"

# Instruction counting: the guest's clock advances with the instructions it
# runs (2 ns each, sleep=off skips idle time), not with the host's wall
# clock, so a busy host slows the test down but cannot make the guest see
# late clock edges. PADLINE_VM_ICOUNT=off runs on the wall clock instead.
icount="-icount shift=1,sleep=off"
[ "${PADLINE_VM_ICOUNT:-on}" = off ] && icount=""
log=${PADLINE_VM_LOG:-$work/console.log}
echo "kernel-gpio-test: booting qemu-system-x86_64 (software emulation); console in $log"
t2=$(date +%s.%N)
set +e
timeout "${PADLINE_VM_TIMEOUT:-1800}" qemu-system-x86_64 -accel tcg $icount -m 512 -nographic -no-reboot \
	-kernel "$kernel" -initrd "$work/initrd.gz" \
	-append "console=ttyS0 panic=-1 quiet gpiovm.cmd=${PADLINE_VM_CMD:-run}" </dev/null >"$log" 2>&1
rc=$?
set -e
t3=$(date +%s.%N)
tr -d '\r' <"$log" | grep -E '^GPIOVM|padline|panic|Kernel' || true
echo "kernel-gpio-test: qemu ran $(echo "$t3 - $t2" | bc) s (exit $rc)"
[ $rc = 124 ] && echo "kernel-gpio-test: the virtual machine did not finish within ${PADLINE_VM_TIMEOUT:-1800} s (PADLINE_VM_TIMEOUT) and was stopped" >&2
if grep -q '^GPIOVM RESULT PASS' <(tr -d '\r' <"$log"); then
	echo "kernel-gpio-test: PASS"
	exit 0
fi
echo "kernel-gpio-test: FAIL (full console log: $log)" >&2
[ -n "${PADLINE_VM_LOG:-}" ] || tail -50 "$log" >&2
exit 1
