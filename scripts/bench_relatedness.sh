#!/usr/bin/env bash
# Throughput and memory of `tamis relatedness`.
#
# 1. The accumulator's products against Eigen's own product on the same
#    shapes, in the same run (scripts/bench/relatedness_bench.cpp): random
#    dosages, SAMPLES x MARKERS, 1% missing, ROUNDS interleaved rounds, one
#    thread (Eigen's product runs on one: the build sets EIGEN_DONT_PARALLELIZE),
#    then THREADS threads for the accumulator's scaling.
# 2. Peak memory of the command on one cohort of COHORT_SAMPLES samples with
#    two marker counts (VARIANTS and a quarter of it), ROUNDS interleaved runs
#    under GNU time -v, medians: the tiles, not the markers, should set it.
#
# Environment: SAMPLES (4096), MARKERS (2048), COHORT_SAMPLES (3000),
# VARIANTS (40000), ROUNDS (5), THREADS (2), JOBS (build jobs, 2),
# TAMIS_BENCH_BUILD_DIR, TAMIS_BENCH_DIR (data), KEEP_DATA.
# Run it when the machine is otherwise idle: the figures are wall times.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
build=${TAMIS_BENCH_BUILD_DIR:-$root/build-bench}
data=${TAMIS_BENCH_DIR:-$build/bench_data}
samples=${SAMPLES:-4096}
markers=${MARKERS:-2048}
cohort_samples=${COHORT_SAMPLES:-3000}
variants=${VARIANTS:-40000}
small_variants=$((variants / 4))
rounds=${ROUNDS:-5}
threads=${THREADS:-2}
jobs=${JOBS:-2}

[ -x /usr/bin/time ] || { echo "GNU time is needed: apt-get install time" >&2; exit 1; }

cmake -S "$root" -B "$build" -DCMAKE_BUILD_TYPE=Release -DTAMIS_BUILD_BENCH=ON > /dev/null
cmake --build "$build" -j "$jobs" --target tamis relatedness_bench > /dev/null
tamis="$build/tamis"
products="$build/scripts/bench/relatedness_bench"

echo "== products: accumulator against Eigen's Z Z^T on the same blocks"
"$products" "$samples" "$markers" "$rounds" 0.01 1
echo "-- the accumulator on $threads threads (Eigen's product stays on one)"
"$products" "$samples" "$markers" "$rounds" 0.01 "$threads"

mkdir -p "$data"
make_cohort() {  # PREFIX VARIANTS
  [ -f "$1.vcf.gz" ] || "$tamis" simulate --out "$1" --samples "$cohort_samples" --variants "$2" > /dev/null 2>&1
}
large="$data/relatedness_${cohort_samples}x${variants}"
small="$data/relatedness_${cohort_samples}x${small_variants}"
make_cohort "$large" "$variants"
make_cohort "$small" "$small_variants"

# measure (wall time and peak memory under GNU time -v) and median.
. "$root/scripts/bench_common.sh"

echo "== peak memory: $cohort_samples samples, $small_variants and $variants variants, $threads threads"
small_peaks=() large_peaks=() small_walls=() large_walls=()
for round in $(seq "$rounds"); do
  read -r wall peak < <(measure "$tamis" relatedness --genotypes "$small.vcf.gz" --out "$data/rel_small" \
    --threads "$threads" --quiet)
  small_peaks+=("$peak") small_walls+=("$wall")
  read -r wall peak < <(measure "$tamis" relatedness --genotypes "$large.vcf.gz" --out "$data/rel_large" \
    --threads "$threads" --quiet)
  large_peaks+=("$peak") large_walls+=("$wall")
done
markers_of() { awk -F': ' '/tamis_relatedness_markers/ { print $2 }' "$1.relatedness.tsv.gz-meta.yaml"; }
small_peak=$(printf '%s\n' "${small_peaks[@]}" | median)
large_peak=$(printf '%s\n' "${large_peaks[@]}" | median)
printf '%d markers: peak RSS %d MB, wall %.2f s\n' "$(markers_of "$data/rel_small")" "$((small_peak / 1024))" \
  "$(printf '%s\n' "${small_walls[@]}" | median)"
printf '%d markers: peak RSS %d MB, wall %.2f s\n' "$(markers_of "$data/rel_large")" "$((large_peak / 1024))" \
  "$(printf '%s\n' "${large_walls[@]}" | median)"
awk -v s="$small_peak" -v l="$large_peak" 'BEGIN { printf "peak RSS ratio (4x the markers): %.2f\n", l / s }'

[ -n "${KEEP_DATA:-}" ] || rm -f "$data"/rel_small.* "$data"/rel_large.*
