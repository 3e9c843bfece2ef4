#!/usr/bin/env bash
# Cost of the binary mixed-model scan (logistic mixed null model by PQL,
# saddlepoint-calibrated score tests) against the plain binary scan of the
# same cohort, and the cost of the null fit at 50,000 samples.
#
# 1. Simulates a cohort (5000 samples x 20000 variants by default, 30% of the
#    samples in families of 2 to 6, h^2 = 0.5 on the logit liability scale,
#    10% cases), converts it to BCF, builds its relatedness matrix with
#    `tamis relatedness`, then runs the plain scan and the mixed-model scan
#    (`--relatedness`) of the binary trait winter_wheeze, interleaved ROUNDS
#    times at THREADS threads, and prints the median wall times, their ratio
#    (target: at most 2) and the median peak memory (GNU time -v); the same
#    again as score-only screens (--confirm-below 0), which leave out the
#    confirmation refits of the hits (six variants are planted).
# 2. Simulates FIT_SAMPLES samples (50,000) with 30% in families and a
#    handful of null variants (FIT_VARIANTS, 64), takes their relatedness from the
#    pedigree (PREFIX.families.tsv; the tabular method: 1/2 for parent and
#    child or full siblings, 1/4 half-siblings, 1/8 first cousins), and times
#    the binary scan with and without the matrix at --threads 1 and
#    --confirm-below 0, interleaved ROUNDS times: with so few variants and no
#    refits the difference is the null fit (target: under 60 s on one core). The mixed scan's log is printed: it
#    gives tau, the PQL iterations and their time.
#
# Environment: SAMPLES, VARIANTS, PREVALENCE (0.1), ROUNDS (3), THREADS (2),
# KEEP_ABOVE (0.05), FIT_SAMPLES, FIT_VARIANTS, TAMIS (the binary; default
# build/tamis), TAMIS_BENCH_DIR (data). Run it when the machine is otherwise
# idle: the figures are wall times.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
tamis=${TAMIS:-$root/build/tamis}
data=${TAMIS_BENCH_DIR:-$root/build/bench_binary_mixed}
samples=${SAMPLES:-5000}
variants=${VARIANTS:-20000}
prevalence=${PREVALENCE:-0.1}
rounds=${ROUNDS:-3}
threads=${THREADS:-2}
keep_above=${KEEP_ABOVE:-0.05}
fit_samples=${FIT_SAMPLES:-50000}
fit_variants=${FIT_VARIANTS:-64}
[ -x /usr/bin/time ] || { echo "GNU time is needed: apt-get install time" >&2; exit 1; }
command -v bcftools > /dev/null || { echo "bcftools is needed: apt-get install bcftools" >&2; exit 1; }
# measure (wall time and peak memory under GNU time -v) and median.
. "$root/scripts/bench_common.sh"
covariates=age,sex,village,pc1,pc2,pc3,pc4
mkdir -p "$data"

# scan_times NAME GENOTYPES TRAITS THREADS EXTRA... : appends "seconds peak_kb" to NAME.times
scan_times() {
  local name=$1 genotypes=$2 traits=$3 scan_threads=$4; shift 4
  measure "$tamis" scan --genotypes "$genotypes" --traits "$traits" --trait winter_wheeze \
    --covariates "$covariates" --threads "$scan_threads" --quiet --out "$data/$name" "$@" >> "$data/$name.times"
}
report() {  # NAME LABEL
  printf '%s: median %s s, peak %s KB\n' "$2" "$(cut -d' ' -f1 "$data/$1.times" | median)" \
    "$(cut -d' ' -f2 "$data/$1.times" | median)"
}
ratio() { echo "scale=3; $(cut -d' ' -f1 "$data/$1.times" | median) / $(cut -d' ' -f1 "$data/$2.times" | median)" | bc; }

# 1. The scan: mixed against plain.
cohort="$data/cohort"
if [ ! -e "$cohort.bcf" ]; then
  "$tamis" simulate --out "$cohort" --samples "$samples" --variants "$variants" --seed 2026 \
    --families 0.3 --heritability 0.5 --prevalence "$prevalence" 2>/dev/null
  bcftools view -Ob -o "$cohort.bcf" "$cohort.vcf.gz" && bcftools index "$cohort.bcf"
fi
"$tamis" relatedness --genotypes "$cohort.bcf" --keep-above "$keep_above" --threads "$threads" --quiet \
  --out "$cohort"
: > "$data/plain.times"; : > "$data/mixed.times"; : > "$data/plain_screen.times"; : > "$data/mixed_screen.times"
matrix=(--relatedness "$cohort.relatedness.tsv.gz")
for round in $(seq "$rounds"); do
  scan_times plain "$cohort.bcf" "$cohort.traits.tsv" "$threads"
  scan_times mixed "$cohort.bcf" "$cohort.traits.tsv" "$threads" "${matrix[@]}"
  scan_times plain_screen "$cohort.bcf" "$cohort.traits.tsv" "$threads" --confirm-below 0
  scan_times mixed_screen "$cohort.bcf" "$cohort.traits.tsv" "$threads" --confirm-below 0 "${matrix[@]}"
done
grep "cases\|null model\|Laplace\|related groups\|confirmed" "$data/mixed.log"
echo "samples $samples, variants $variants, prevalence $prevalence, threads $threads, rounds $rounds (BCF)"
report plain "plain binary scan"
report mixed "binary mixed-model scan"
echo "mixed / plain: $(ratio mixed plain) (target <= 2)"
report plain_screen "plain binary screen (--confirm-below 0)"
report mixed_screen "binary mixed-model screen (--confirm-below 0)"
echo "mixed / plain, screens: $(ratio mixed_screen plain_screen)"

# 2. The null fit at FIT_SAMPLES samples, relatedness from the pedigree.
fit="$data/fit$fit_samples"
if [ ! -e "$fit.pedigree.tsv" ]; then
  "$tamis" simulate --out "$fit" --samples "$fit_samples" --variants "$fit_variants" --seed 2027 --causal 0 \
    --families 0.3 --heritability 0.5 --prevalence "$prevalence" 2>/dev/null
  # The tabular method, family by family (parents come before their
  # children in families.tsv): A_jj = 1 + A_fm / 2 and A_ij = (A_if + A_im) / 2
  # for i before j; the genotyped members' pairs are written.
  awk -F'\t' -v OFS='\t' '
    function write_family(   i, j) {
      for (i = 1; i <= n; ++i) for (j = i; j <= n; ++j)
        if (genotyped[i] && genotyped[j] && a[i, j] > 0) print id[i], id[j], a[i, j]
      delete a; delete index_of; delete genotyped; n = 0
    }
    BEGIN { print "sample_1", "sample_2", "relatedness" }
    NR == 1 || $1 == "NA" { next }
    $1 != family { write_family(); family = $1 }
    {
      id[++n] = $2; index_of[$2] = n; genotyped[n] = $5 != "ancestor"
      f = ($3 in index_of) ? index_of[$3] : 0; m = ($4 in index_of) ? index_of[$4] : 0
      for (j = 1; j < n; ++j) a[n, j] = a[j, n] = 0.5 * (a[j, f] + a[j, m])
      a[n, n] = 1 + 0.5 * a[f, m]
    }
    END { write_family() }' "$fit.families.tsv" > "$fit.pedigree.tsv"
fi
: > "$data/fit_plain.times"; : > "$data/fit_mixed.times"
for round in $(seq "$rounds"); do
  scan_times fit_plain "$fit.vcf.gz" "$fit.traits.tsv" 1 --confirm-below 0
  scan_times fit_mixed "$fit.vcf.gz" "$fit.traits.tsv" 1 --confirm-below 0 --relatedness "$fit.pedigree.tsv"
done
grep "cases\|null model\|Laplace\|related groups\|wall time" "$data/fit_mixed.log"
echo "samples $fit_samples ($(awk -F'\t' 'NR > 1 && $5 != "ancestor" && $1 != "NA"' "$fit.families.tsv" | wc -l) in families)," \
  "variants $fit_variants, threads 1, rounds $rounds"
report fit_plain "plain binary scan"
report fit_mixed "binary mixed-model scan"
echo "null fit (mixed - plain, medians): $(echo "$(cut -d' ' -f1 "$data/fit_mixed.times" | median) - \
$(cut -d' ' -f1 "$data/fit_plain.times" | median)" | bc) s (target < 60 s)"
