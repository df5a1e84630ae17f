#!/usr/bin/env bash
# Builds the small x86_64 kernel the GPIO virtual-machine test boots, from
# Debian's linux-source-6.1 package: tinyconfig plus kernel.config beside
# this script. The bzImage is cached outside the repo under
#   ${PADLINE_KERNEL_CACHE:-${XDG_CACHE_HOME:-$HOME/.cache}/padline-kernel}/<key>/bzImage
# where <key> hashes kernel.config, the source package's version and the
# compiler's version, so it is built once per machine and rebuilt only when
# one of those changes. Prints the bzImage's path on stdout (progress goes to
# stderr). Needs: linux-source-6.1 gcc make bc flex bison libelf-dev
# libssl-dev (scripts/kernel-gpio-test.sh --install installs them).
#
# Usage: build-kernel.sh            build if not cached, print the path
#        build-kernel.sh --path     print the cached path (exit 1 if absent)
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
frag=$here/kernel.config
src_tar=/usr/src/linux-source-6.1.tar.xz
cache=${PADLINE_KERNEL_CACHE:-${XDG_CACHE_HOME:-$HOME/.cache}/padline-kernel}

srcver=$(dpkg-query -W -f='${Version}' linux-source-6.1 2>/dev/null || echo none)
ccver=$(gcc -dumpfullversion 2>/dev/null || echo none)
key=$( { cat "$frag"; echo "src=$srcver"; echo "cc=$ccver"; echo "arch=x86_64"; } | sha256sum | cut -c1-16)
out=$cache/$key

if [ -s "$out/bzImage" ]; then
	echo "$out/bzImage"
	exit 0
fi
if [ "${1:-}" = "--path" ]; then
	echo "no cached kernel at $out (run $0)" >&2
	exit 1
fi
if [ ! -f "$src_tar" ]; then
	echo "build-kernel: $src_tar missing: apt-get install linux-source-6.1" >&2
	exit 1
fi

mkdir -p "$cache"
exec 9>"$cache/.lock"
echo "build-kernel: waiting for the cache lock ($cache/.lock)" >&2
flock 9
if [ -s "$out/bzImage" ]; then # another build finished while we waited
	echo "$out/bzImage"
	exit 0
fi

work=$cache/build-$key
rm -rf "$work"
mkdir -p "$work"
start=$(date +%s)
echo "build-kernel: extracting $src_tar (linux-source-6.1 $srcver)" >&2
tar -C "$work" -xJf "$src_tar"
tree=$(echo "$work"/linux-source-6.1)
jobs=$(nproc)
mk() { nice -n 10 make -C "$tree" ARCH=x86_64 -j"$jobs" "$@"; }
mk tinyconfig >&2
(cd "$tree" && ./scripts/kconfig/merge_config.sh -m .config "$frag") >&2
mk olddefconfig >&2
missing=$(grep -E '^CONFIG_[A-Z0-9_]+=' "$frag" | while read -r want; do
	grep -qx "$want" "$tree/.config" || echo "$want"
done)
if [ -n "$missing" ]; then
	echo "build-kernel: these options did not stick in .config:" >&2
	echo "$missing" >&2
	exit 1
fi
echo "build-kernel: compiling bzImage with -j$jobs (nice 10)" >&2
mk bzImage >"$work/build.log" 2>&1 || { tail -40 "$work/build.log" >&2; exit 1; }
end=$(date +%s)
mkdir -p "$out.tmp"
cp "$tree/arch/x86/boot/bzImage" "$out.tmp/bzImage"
cp "$tree/.config" "$out.tmp/config"
echo "$((end - start))" >"$out.tmp/build-seconds"
echo "linux-source-6.1 $srcver, gcc $ccver" >"$out.tmp/source"
rm -rf "$out"
mv "$out.tmp" "$out"
rm -rf "$work"
echo "build-kernel: built in $((end - start)) s: $out/bzImage" >&2
echo "$out/bzImage"
