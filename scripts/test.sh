#!/usr/bin/env bash
# Installs what is missing, builds tamis and runs the whole test suite with
# ctest; then runs the suite again under AddressSanitizer and
# UndefinedBehaviorSanitizer, and, where clang is installed, each libFuzzer
# target of the input parsers for a bounded time (TAMIS_FUZZ_SECONDS, default 20).
# A failing stage does not stop the later ones; the script fails at the end
# and names the stages that failed.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"
./scripts/install_dependencies.sh
build=${TAMIS_BUILD_DIR:-build}
asan_build=${TAMIS_ASAN_BUILD_DIR:-build-asan}
fuzz_build=${TAMIS_FUZZ_BUILD_DIR:-build-fuzz}
jobs=$(nproc)
failed=()

cmake -S . -B "$build" -DCMAKE_BUILD_TYPE=Release
cmake --build "$build" -j "$jobs"
ctest --test-dir "$build" --output-on-failure -j "$jobs" || failed+=("tests")

# The sanitized suite checks memory errors, undefined behaviour and leaks; it
# leaves out the reference checks against R, lme4, mpmath and bcftools, the
# calibrations (mixed models, set tests, interaction tests), the signal
# recovery simulation, the 2-million-row rendering test and the Snakemake
# workflow (five minutes under the sanitizers; every command it runs has its
# own sanitized tests), which check numbers, scale and orchestration that the
# plain build has already checked. A few
# tests reach paths where a library itself loses memory (htslib 1.16 after a
# failed threaded read or a failed final write, fontconfig's caches behind a
# report, also in the browser test, which runs `tamis report`): they run
# apart, with tests/lsan_suppressions.txt, because those entries cover whole
# libraries and would hide a leak of ours anywhere else.
cmake -S . -B "$asan_build" -DTAMIS_SANITIZE=ON -DCMAKE_BUILD_TYPE=RelWithDebInfo \
  -DCMAKE_CXX_FLAGS_RELWITHDEBINFO="-O1 -g1" -DCMAKE_C_FLAGS_RELWITHDEBINFO="-O1 -g1"
cmake --build "$asan_build" -j "$jobs"
library_leak_tests='InputErrors\.(CorruptBgzfBlockGivesThePositionReached|DamagedBgzfIsReportedAsDamageNotAsABadRecord)|InterruptedScan\.FullDisk.*|ReportInBrowser\..*'
sanitizer_left_out='reference_.*|SignalSelection\.Recovers.*|MixedCalibration\..*|BinaryMixedCalibration\..*|SetCalibration\..*|InteractionCalibration\..*|LargeReport\..*|workflow_snakemake'
ASAN_OPTIONS=detect_leaks=1 UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 \
  ctest --test-dir "$asan_build" --output-on-failure -j "$jobs" \
  -E "^($sanitizer_left_out|$library_leak_tests)\$" ||
  failed+=("sanitizer tests")
ASAN_OPTIONS=detect_leaks=1 UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 \
  LSAN_OPTIONS="suppressions=$PWD/tests/lsan_suppressions.txt:print_suppressions=0" \
  ctest --test-dir "$asan_build" --output-on-failure -j "$jobs" -R "^($library_leak_tests)\$" ||
  failed+=("sanitizer tests with library leaks suppressed")

clang_cxx=$(command -v clang++ || command -v clang++-14 || true)
clang_c=$(command -v clang || command -v clang-14 || true)
if [ -n "$clang_cxx" ] && [ -n "$clang_c" ]; then
  cmake -S . -B "$fuzz_build" -DCMAKE_C_COMPILER="$clang_c" -DCMAKE_CXX_COMPILER="$clang_cxx" \
    -DCMAKE_BUILD_TYPE=RelWithDebInfo -DTAMIS_FUZZ=ON -DTAMIS_BUILD_TESTS=OFF \
    -DTAMIS_FUZZ_SECONDS="${TAMIS_FUZZ_SECONDS:-20}"
  cmake --build "$fuzz_build" -j "$jobs" --target fuzz_targets
  ctest --test-dir "$fuzz_build" --output-on-failure -j "$jobs" -L fuzz || failed+=("fuzz runs")
else
  echo "test.sh: clang not found, so the fuzz runs are skipped (scripts/install_dependencies.sh installs it)"
fi

if [ ${#failed[@]} -gt 0 ]; then
  echo "test.sh: failed: ${failed[*]}" >&2
  exit 1
fi
echo "test.sh: all stages passed"
