#!/usr/bin/env bash
# Build wavetrim's fuzz targets (tests/fuzz, clang + libFuzzer + ASan/UBSan)
# and run them.
#
# Usage: tools/fuzz.sh TARGET|all [SECONDS]
#   TARGET   fuzz_proto, fuzz_config, ... (or proto, config, ...), or all
#   SECONDS  run time per target (default 60); 0 only replays the corpora
#
# Each target starts from its committed seeds (tests/fuzz/corpus/TARGET,
# never written to) plus what earlier runs found (BUILD/corpus/TARGET) and
# runs for SECONDS with -max_total_time, -rss_limit_mb=2048 and a 10 s
# per-input timeout.  Printed per target: executions, coverage (cov: and
# ft: of libFuzzer's final line) and corpus size.  Exit status 1 when any
# target crashed, leaked, hit a sanitizer report or a timeout; the log
# (BUILD/logs/TARGET.log) is shown and the input kept under
# BUILD/artifacts/TARGET/ (replay it: BUILD/TARGET FILE).
#
# Environment: WT_FUZZ_BUILD (default build-fuzz at the top of the tree),
# WT_FUZZ_CC (default clang-14, else clang).  Needs Debian's clang-14 and
# libclang-rt-14-dev (and the -dev packages of the modules: libinih-dev).
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
build=${WT_FUZZ_BUILD:-"$here/build-fuzz"}
seeds="$here/tests/fuzz/corpus"

usage() {
	echo "usage: tools/fuzz.sh TARGET|all [SECONDS]" >&2
	echo "targets:" $(cd "$here/tests/fuzz" && ls fuzz_*.c |
		sed 's/\.c$//') >&2
	exit 2
}

[ $# -ge 1 ] && [ $# -le 2 ] || usage
which=$1
secs=${2:-60}
[[ "$secs" =~ ^[0-9]+$ ]] || usage

cc=${WT_FUZZ_CC:-}
if [ -z "$cc" ]; then
	if command -v clang-14 >/dev/null; then
		cc=clang-14
	elif command -v clang >/dev/null; then
		cc=clang
	else
		echo "fuzz: no clang; install Debian's clang-14 and" \
			"libclang-rt-14-dev" >&2
		exit 1
	fi
fi

# Targets: every tests/fuzz/fuzz_*.c, or the one asked for.
all=()
for src in "$here"/tests/fuzz/fuzz_*.c; do
	all+=("$(basename "$src" .c)")
done
if [ "$which" = all ]; then
	targets=("${all[@]}")
else
	t=fuzz_${which#fuzz_}
	[ -f "$here/tests/fuzz/$t.c" ] || usage
	targets=("$t")
fi

echo "fuzz: building in $build with $cc"
mkdir -p "$build/logs"
cfglog="$build/logs/configure.log"
cmake -S "$here/tests/fuzz" -B "$build" -DCMAKE_C_COMPILER="$cc" \
	-DCMAKE_BUILD_TYPE=RelWithDebInfo >"$cfglog" 2>&1 || {
	cat "$cfglog" >&2
	exit 1
}
grep 'fuzz: skipping' "$cfglog" || true
build_targets=()
for t in "${targets[@]}"; do
	if ! grep -q "fuzz: skipping $t " "$cfglog"; then
		build_targets+=("$t")
	fi
done
if [ ${#build_targets[@]} -gt 0 ]; then
	cmake --build "$build" -j "$(nproc)" --target "${build_targets[@]}"
fi

# UBSan findings abort (compiled with -fno-sanitize-recover); print their
# stacks.  Leaks are checked after every input and at exit.
export UBSAN_OPTIONS=${UBSAN_OPTIONS:-print_stacktrace=1:halt_on_error=1}
export ASAN_OPTIONS=${ASAN_OPTIONS:-detect_leaks=1}
# symbolized stacks (Debian's llvm-14 has the symbolizer under a versioned
# name only)
if [ -z "${ASAN_SYMBOLIZER_PATH:-}" ] && ! command -v llvm-symbolizer \
	>/dev/null; then
	for s in llvm-symbolizer-14 /usr/lib/llvm-14/bin/llvm-symbolizer; do
		if command -v "$s" >/dev/null; then
			export ASAN_SYMBOLIZER_PATH
			ASAN_SYMBOLIZER_PATH=$(command -v "$s")
			break
		fi
	done
fi

failed=0
summary=()
for t in "${targets[@]}"; do
	if [ ! -x "$build/$t" ] ||
		grep -q "fuzz: skipping $t " "$cfglog"; then
		summary+=("$(printf '%-14s %-8s' "$t" skipped)")
		continue
	fi
	work="$build/corpus/$t"
	arts="$build/artifacts/$t"
	log="$build/logs/$t.log"
	mkdir -p "$work" "$arts"
	args=(-rss_limit_mb=2048 -timeout=10 -print_final_stats=1
		-artifact_prefix="$arts/")
	if [ "$secs" -gt 0 ]; then
		args+=(-max_total_time="$secs")
	else
		args+=(-runs=0)
	fi
	if [ -f "$build/$t.dict" ]; then
		args+=(-dict="$build/$t.dict")
	fi
	echo "fuzz: $t for ${secs} s (log: $log)"
	# scratch files of the targets, on tmpfs where there is one
	shm=/dev/shm
	[ -d "$shm" ] && [ -w "$shm" ] || shm=${TMPDIR:-/tmp}
	scratch=$(mktemp -d "$shm/wt_fuzz.XXXXXX")
	touch "$scratch/start" # inputs saved after this are this run's
	rc=0
	WT_FUZZ_TMP="$scratch" "$build/$t" "${args[@]}" "$work" "$seeds/$t" \
		>"$log" 2>&1 || rc=$?
	new_arts=$(find "$arts" -type f -newer "$scratch/start" | sort)
	rm -rf "$scratch"

	execs=$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" |
		tail -1)
	last=$(grep -E '^#[0-9]+[[:space:]]' "$log" | tail -1 || true)
	cov=$(sed -n 's/.* cov: \([0-9]*\).*/\1/p' <<<"$last")
	ft=$(sed -n 's/.* ft: \([0-9]*\).*/\1/p' <<<"$last")
	corp=$(sed -n 's/.* corp: \([0-9]*\).*/\1/p' <<<"$last")
	result=ok
	bad='ERROR: (AddressSanitizer|LeakSanitizer|libFuzzer)|runtime error:'
	bad+='|^SUMMARY: |property violated'
	if [ "$rc" -ne 0 ] || grep -qE "$bad" "$log"; then
		result=FAILED
		failed=1
		echo "fuzz: $t FAILED (exit $rc); end of $log:" >&2
		tail -n 60 "$log" >&2
		for a in $new_arts; do
			echo "fuzz: reproduce: $build/$t $a" >&2
		done
	fi
	summary+=("$(printf '%-14s %-8s %12s %8s %8s %8s' "$t" "$result" \
		"${execs:-?}" "${cov:-?}" "${ft:-?}" "${corp:-?}")")
done

echo
printf '%-14s %-8s %12s %8s %8s %8s\n' target result execs cov ft corpus
printf '%s\n' "${summary[@]}"
exit "$failed"
