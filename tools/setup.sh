#!/usr/bin/env bash
# Install the Debian packages wavetrim needs (only the missing ones), then
# configure and build.  Usage: tools/setup.sh [build-dir] [cmake preset args...]
# Environment: WT_BUILD_TYPE (default RelWithDebInfo), WT_SANITIZE=1 for
# AddressSanitizer + UBSan, WT_WERROR (default 1).
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
build=${1:-"$here/build"}

pkgs=(build-essential cmake pkg-config
	libzmq3-dev libcmocka-dev libinih-dev
	liblapacke-dev libopenblas-dev
	libhdf5-dev libfftw3-dev
	python3 python3-numpy python3-h5py python3-zmq
	libmicrohttpd-dev chromium python3-websocket
	clang-14 libclang-rt-14-dev llvm-14)

missing=()
for p in "${pkgs[@]}"; do
	if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null |
		grep -q 'install ok installed'; then
		missing+=("$p")
	fi
done

if [ ${#missing[@]} -gt 0 ]; then
	echo "setup: installing ${missing[*]}"
	sudo=""
	[ "$(id -u)" -eq 0 ] || sudo=sudo
	export DEBIAN_FRONTEND=noninteractive
	$sudo apt-get update -qq
	$sudo apt-get install -y -qq --no-install-recommends "${missing[@]}"
fi

cmake -S "$here" -B "$build" \
	-DCMAKE_BUILD_TYPE="${WT_BUILD_TYPE:-RelWithDebInfo}" \
	-DWT_SANITIZE="${WT_SANITIZE:-OFF}" \
	-DWT_WERROR="${WT_WERROR:-ON}"
cmake --build "$build" -j "$(nproc)"
