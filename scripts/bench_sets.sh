#!/usr/bin/env bash
# Cost of the variant-set tests: the same scan without and with --sets.
#
# Simulates a cohort of mostly rare variants (SAMPLES 5000 x VARIANTS 200000,
# 90% below 1% frequency, on 10 chromosomes so that positions stay within a
# tabix index's range; the simulation takes over a minute and is kept in
# the data folder for later runs), converts it to BCF, and writes
# a BED of consecutive windows of GENE_SIZE (10) variants, one gene each
# (20,000 genes). Then runs `scan` of fev1_litres and winter_wheeze without
# and with `--sets` (Beta(1, 25) weights, the default frequency ceiling),
# interleaved ROUNDS (3) times at THREADS (2), and prints the median wall
# times, the median of the rounds' ratios (target: at most 1.30) and the
# median peak memory of both (GNU time -v).
#
# Environment: SAMPLES, VARIANTS, GENE_SIZE, ROUNDS, THREADS, FORMAT (bcf or
# vcf.gz), TAMIS (the binary; default build/tamis), TAMIS_BENCH_DIR (data),
# KEEP_DATA (keep the scans' outputs). Run it when the machine is otherwise
# idle: the figures are wall times.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
tamis=${TAMIS:-$root/build/tamis}
data=${TAMIS_BENCH_DIR:-$root/build/bench_sets}
samples=${SAMPLES:-5000}
variants=${VARIANTS:-200000}
gene_size=${GENE_SIZE:-10}
rounds=${ROUNDS:-3}
threads=${THREADS:-2}
format=${FORMAT:-bcf}
[ -x /usr/bin/time ] || { echo "GNU time is needed: apt-get install time" >&2; exit 1; }
command -v bcftools > /dev/null || { echo "bcftools is needed: apt-get install bcftools" >&2; exit 1; }
# measure (wall time and peak memory under GNU time -v) and median.
. "$root/scripts/bench_common.sh"
mkdir -p "$data"

cohort="$data/cohort_${samples}x${variants}"
if [ ! -e "$cohort.vcf.gz" ]; then
  "$tamis" simulate --out "$cohort" --samples "$samples" --variants "$variants" --chromosomes 10 \
    --rare-fraction 0.9 --seed 1216 > /dev/null 2>&1
fi
if [ "$format" = bcf ] && [ ! -e "$cohort.bcf.csi" ]; then
  bcftools view -Ob -o "$cohort.bcf" "$cohort.vcf.gz" && bcftools index -f "$cohort.bcf"
fi
genotypes="$cohort.$format"
genes="$cohort.genes_of_${gene_size}.bed"
if [ ! -e "$genes" ]; then
  # BED: from the first variant's position - 1 (0-based) to the last's (half-open).
  bcftools query -f '%CHROM\t%POS\n' "$cohort.vcf.gz" | awk -v size="$gene_size" '
    $1 != chrom || count == size {
      if (count > 0) printf "%s\t%d\t%d\tgene_%05d\n", chrom, first - 1, last, ++genes
      chrom = $1; first = $2; count = 0
    }
    { count++; last = $2 }
    END { printf "%s\t%d\t%d\tgene_%05d\n", chrom, first - 1, last, ++genes }' > "$genes"
fi

scan_args=("$tamis" scan --genotypes "$genotypes" --traits "$cohort.traits.tsv" --trait fev1_litres
  --trait winter_wheeze --covariates age,sex,village,pc1,pc2,pc3,pc4 --threads "$threads" --quiet)
plain_times=() set_times=() ratios=() plain_peaks=() set_peaks=()
for round in $(seq "$rounds"); do
  read -r plain_wall plain_peak < <(measure "${scan_args[@]}" --out "$data/plain")
  read -r set_wall set_peak < <(measure "${scan_args[@]}" --sets "$genes" --out "$data/sets")
  plain_times+=("$plain_wall") set_times+=("$set_wall") plain_peaks+=("$plain_peak") set_peaks+=("$set_peak")
  ratios+=("$(awk -v s="$set_wall" -v p="$plain_wall" 'BEGIN { printf "%.3f", s / p }')")
done

echo "cohort: $samples samples x $variants variants ($format), $(wc -l < "$genes") genes of $gene_size variants," \
  "$threads threads, $rounds rounds"
grep -E "^sets:|sets tested" "$data/sets.log" || true
printf 'scan without --sets: median %.2f s, peak RSS %d MB\n' "$(printf '%s\n' "${plain_times[@]}" | median)" \
  "$(( $(printf '%s\n' "${plain_peaks[@]}" | median) / 1024 ))"
printf 'scan with --sets:    median %.2f s, peak RSS %d MB\n' "$(printf '%s\n' "${set_times[@]}" | median)" \
  "$(( $(printf '%s\n' "${set_peaks[@]}" | median) / 1024 ))"
printf 'with / without: %.3f (rounds: %s; target <= 1.30)\n' "$(printf '%s\n' "${ratios[@]}" | median)" "${ratios[*]}"
[ -n "${KEEP_DATA:-}" ] || rm -f "$data"/plain.* "$data"/sets.*
