#!/usr/bin/env bash
# Throughput of the scan against the htslib decode floor, and of the score
# kernel.
#
# Builds tamis and the benchmarks (Release, in build-bench/), simulates a
# cohort (5000 samples x 20000 variants, GT:DS) and its BCF copy, then runs
# the decode floor (scripts/bench/decode_floor.c: bcf_read, bcf_unpack and
# bcf_get_format_float of DS on one thread), the reader alone
# (scripts/bench/read_throughput.cpp) and the scan interleaved, ROUNDS times
# each, on VCF.gz and on BCF. Prints the median wall times, the median
# ratios to the floor, and the scan's median peak memory (GNU time -v) at
# 20000 and at 5000 variants. Ends with the Google Benchmark of the blocked score
# kernel against width-1 calls.
#
# Environment: SAMPLES, VARIANTS, ROUNDS, THREADS (scan threads, 2), JOBS
# (build jobs, 2), TAMIS_BENCH_BUILD_DIR, TAMIS_BENCH_DIR (data), KEEP_DATA.
# Run it when the machine is otherwise idle: the figures are wall times.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
build=${TAMIS_BENCH_BUILD_DIR:-$root/build-bench}
data=${TAMIS_BENCH_DIR:-$build/bench_data}
samples=${SAMPLES:-5000}
variants=${VARIANTS:-20000}
small_variants=$((variants / 4))
rounds=${ROUNDS:-3}
threads=${THREADS:-2}
jobs=${JOBS:-2}

[ -x /usr/bin/time ] || { echo "GNU time is needed: apt-get install time" >&2; exit 1; }
command -v bcftools > /dev/null || { echo "bcftools is needed: apt-get install bcftools" >&2; exit 1; }

cmake -S "$root" -B "$build" -DCMAKE_BUILD_TYPE=Release -DTAMIS_BUILD_BENCH=ON > /dev/null
cmake --build "$build" -j "$jobs" --target tamis decode_floor score_kernel_bench read_throughput > /dev/null
tamis="$build/tamis"
floor="$build/scripts/bench/decode_floor"
reader="$build/scripts/bench/read_throughput"
kernel_bench="$build/scripts/bench/score_kernel_bench"

mkdir -p "$data"
make_cohort() {  # PREFIX VARIANTS
  if [ ! -f "$1.vcf.gz" ]; then
    "$tamis" simulate --out "$1" --samples "$samples" --variants "$2" > /dev/null 2>&1
  fi
  if [ ! -f "$1.bcf.csi" ]; then
    bcftools view -Ob -o "$1.bcf" "$1.vcf.gz" && bcftools index -f "$1.bcf"
  fi
}
cohort="$data/cohort_${samples}x${variants}"
small_cohort="$data/cohort_${samples}x${small_variants}"
make_cohort "$cohort" "$variants"
make_cohort "$small_cohort" "$small_variants"

# measure (wall time and peak memory under GNU time -v) and median.
. "$root/scripts/bench_common.sh"

# The scan's command line in the array `scan_args` (GNU time runs programs,
# not shell functions).
set_scan_args() {  # TRAITS GENOTYPES OUT
  scan_args=("$tamis" scan --genotypes "$2" --traits "$1" --trait fev1_litres --trait winter_wheeze
    --covariates age,sex,village,pc1,pc2,pc3,pc4 --out "$3" --threads "$threads" --quiet)
}

echo "cohort: $samples samples x $variants variants (GT:DS), scan with $threads threads, $rounds rounds"
for format in vcf.gz bcf; do
  input="$cohort.$format"
  floor_times=() scan_times=() ratios=() peaks=() reader_ratios=()
  for round in $(seq "$rounds"); do
    read -r floor_wall _ < <(measure "$floor" "$input")
    # The reader alone (read serially, decode on THREADS - 1 threads, no statistics).
    read -r reader_wall _ < <(measure "$reader" "$input" "$((threads > 1 ? threads - 1 : 0))")
    reader_ratios+=("$(awk -v r="$reader_wall" -v f="$floor_wall" 'BEGIN { printf "%.3f", r / f }')")
    set_scan_args "$cohort.traits.tsv" "$input" "$data/scan_$format"
    read -r scan_wall scan_peak < <(measure "${scan_args[@]}")
    floor_times+=("$floor_wall") scan_times+=("$scan_wall") peaks+=("$scan_peak")
    ratios+=("$(awk -v s="$scan_wall" -v f="$floor_wall" 'BEGIN { printf "%.3f", s / f }')")
    rm -f "$data/scan_$format".*
  done
  printf '%-6s floor %6.2f s   scan %6.2f s   scan/floor %.2f (rounds: %s)   peak RSS %d MB\n' "$format" \
    "$(printf '%s\n' "${floor_times[@]}" | median)" "$(printf '%s\n' "${scan_times[@]}" | median)" \
    "$(printf '%s\n' "${ratios[@]}" | median)" "${ratios[*]}" \
    "$(( $(printf '%s\n' "${peaks[@]}" | median) / 1024 ))"
  printf '%-6s reader alone / floor %.2f (rounds: %s)\n' "$format" \
    "$(printf '%s\n' "${reader_ratios[@]}" | median)" "${reader_ratios[*]}"
done

# Memory against variant count: the same samples, a quarter of the variants.
# Peak RSS moves by a few MB from run to run (allocator and thread timing),
# so each size is measured ROUNDS times, interleaved, and the medians compared.
small_peaks=() large_peaks=()
for round in $(seq "$rounds"); do
  set_scan_args "$small_cohort.traits.tsv" "$small_cohort.vcf.gz" "$data/scan_small"
  read -r _ peak < <(measure "${scan_args[@]}")
  small_peaks+=("$peak")
  set_scan_args "$cohort.traits.tsv" "$cohort.vcf.gz" "$data/scan_large"
  read -r _ peak < <(measure "${scan_args[@]}")
  large_peaks+=("$peak")
  rm -f "$data"/scan_small.* "$data"/scan_large.*
done
small_peak=$(printf '%s\n' "${small_peaks[@]}" | median)
large_peak=$(printf '%s\n' "${large_peaks[@]}" | median)
awk -v s="$small_peak" -v l="$large_peak" -v sv="$small_variants" -v lv="$variants" 'BEGIN {
  printf "peak RSS (VCF.gz, median): %d MB at %d variants, %d MB at %d variants (ratio %.2f)\n",
    s / 1024, sv, l / 1024, lv, l / s }'

echo "score kernel (samples x variants per second):"
"$kernel_bench" --benchmark_repetitions="$rounds" --benchmark_report_aggregates_only=true \
  --benchmark_counters_tabular=true 2>/dev/null | grep -E "median|Benchmark"

[ -n "${KEEP_DATA:-}" ] || rm -f "$data"/scan_*
