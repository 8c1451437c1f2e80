#!/usr/bin/env bash
# Builds the libFuzzer targets with clang (ASan + UBSan) and runs each for a bounded time on a copy of its seed
# corpus. Findings (crashes, hangs, sanitizer reports) land in tests/fuzz/findings/; add each, once fixed, to the
# target's corpus as a regression case.
# Usage: tests/fuzz/run.sh [seconds per target, default 60] [target ...]   (default: every target)
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds="${1:-60}"
shift $(( $# > 0 ? 1 : 0 ))
all="fuzz_line_protocol fuzz_toml_loaders fuzz_files fuzz_modbus_reply fuzz_framed"
targets="${*:-$all}"
build=build-fuzz
if [ ! -f "$build/CMakeCache.txt" ]; then
  CC=clang CXX=clang++ cmake -S . -B "$build" -DLOADTRIM_FUZZ=ON -DBUILD_TESTING=OFF -DCMAKE_BUILD_TYPE=RelWithDebInfo \
    -DCMAKE_CXX_FLAGS="-fsanitize=fuzzer-no-link,address,undefined -fno-omit-frame-pointer" >/dev/null
else
  cmake -S . -B "$build" >/dev/null  # picks up targets added since the folder was configured
fi
# shellcheck disable=SC2086
cmake --build "$build" -j "$(nproc)" --target $targets
mkdir -p tests/fuzz/findings
status=0
for t in $targets; do
  work=$(mktemp -d)
  cp -r "tests/fuzz/corpus/$t/." "$work/" 2>/dev/null || true
  echo "== $t for ${seconds}s"
  if ! "$build/bin/$t" -max_total_time="$seconds" -timeout=10 -rss_limit_mb=2048 -print_final_stats=1 \
       -artifact_prefix="tests/fuzz/findings/$t-" "$work" 2>&1 | tail -n 12; then
    status=1
  fi
  rm -rf "$work"
done
exit $status
