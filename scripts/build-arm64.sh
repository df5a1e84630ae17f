#!/usr/bin/env bash
# Cross-build padline for an arm64 (aarch64) Linux station.
#
# Installs Debian's gcc-aarch64-linux-gnu when aarch64-linux-gnu-gcc is
# missing (needs root and apt-get: the SQLite driver github.com/mattn/go-sqlite3
# is cgo, so the build needs a C cross-compiler), builds
# dist/padline-linux-arm64 with cgo, and checks that the result is an aarch64
# ELF executable. The version is embedded by Go's build info (vcs stamping).
#
# Usage: bash scripts/build-arm64.sh [output path]
set -euo pipefail
cd "$(dirname "$0")/.."

out=${1:-dist/padline-linux-arm64}
cc=aarch64-linux-gnu-gcc

if ! command -v "$cc" >/dev/null 2>&1; then
	if ! command -v apt-get >/dev/null 2>&1; then
		echo "build-arm64: $cc not found and no apt-get to install gcc-aarch64-linux-gnu" >&2
		exit 1
	fi
	sudo=
	if [ "$(id -u)" -ne 0 ]; then sudo=sudo; fi
	echo "build-arm64: installing gcc-aarch64-linux-gnu"
	$sudo apt-get update -qq
	DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq --no-install-recommends \
		gcc-aarch64-linux-gnu libc6-dev-arm64-cross >/dev/null
fi

mkdir -p "$(dirname "$out")"
# The version every run records: the git description when there is one.
version=$(git describe --always --dirty 2>/dev/null || echo unknown)
CGO_ENABLED=1 GOOS=linux GOARCH=arm64 CC=$cc \
	go build -trimpath -buildvcs=auto -ldflags "-X main.buildVersion=$version" -o "$out" ./cmd/padline

# Check the ELF header: magic, 64-bit class, little-endian, e_machine 183
# (EM_AARCH64). `file` is used when present; od reads the header otherwise.
if command -v file >/dev/null 2>&1; then
	desc=$(file -b "$out")
	case $desc in
	ELF\ 64-bit\ LSB*ARM\ aarch64*) ;;
	*) echo "build-arm64: $out is not an aarch64 ELF: $desc" >&2; exit 1 ;;
	esac
else
	magic=$(od -An -tx1 -N4 "$out" | tr -d ' \n')
	class=$(od -An -tu1 -j4 -N1 "$out" | tr -d ' \n')
	data=$(od -An -tu1 -j5 -N1 "$out" | tr -d ' \n')
	machine=$(od -An -tu2 -j18 -N2 --endian=little "$out" | tr -d ' \n')
	if [ "$magic" != 7f454c46 ] || [ "$class" != 2 ] || [ "$data" != 1 ] || [ "$machine" != 183 ]; then
		echo "build-arm64: $out is not an aarch64 ELF (magic $magic class $class data $data machine $machine)" >&2
		exit 1
	fi
	desc="ELF 64-bit LSB, e_machine 183 (aarch64)"
fi
size=$(wc -c <"$out" | tr -d ' ')
echo "build-arm64: $out ($size bytes): $desc"
