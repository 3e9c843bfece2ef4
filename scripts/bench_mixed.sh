#!/usr/bin/env bash
# Cost of the mixed-model scan against the plain scan of the same cohort.
#
# Simulates a cohort (5000 samples x 20000 variants by default, 30% of the
# samples in families of 2 to 6, polygenic h^2 = 0.5), converts it to BCF,
# builds its relatedness matrix with `tamis relatedness`, then runs the plain
# scan and the mixed-model scan (`--relatedness`) of the quantitative trait,
# interleaved ROUNDS times, and prints the median wall times, their ratio
# and the median peak memory (GNU time -v). With BASELINE set to another
# tamis binary (an earlier build), its mixed-model scan joins each round.
#
# Environment: SAMPLES, VARIANTS, ROUNDS (3), THREADS (2), KEEP_ABOVE (0.05),
# TAMIS (the binary; default build/tamis), BASELINE, TAMIS_BENCH_DIR (data).
# Run it when the machine is otherwise idle: the figures are wall times.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
tamis=${TAMIS:-$root/build/tamis}
data=${TAMIS_BENCH_DIR:-$root/build/bench_mixed}
samples=${SAMPLES:-5000}
variants=${VARIANTS:-20000}
rounds=${ROUNDS:-3}
threads=${THREADS:-2}
keep_above=${KEEP_ABOVE:-0.05}
baseline=${BASELINE:-}
[ -x /usr/bin/time ] || { echo "GNU time is needed: apt-get install time" >&2; exit 1; }
command -v bcftools > /dev/null || { echo "bcftools is needed: apt-get install bcftools" >&2; exit 1; }

mkdir -p "$data"
cohort="$data/cohort"
if [ ! -e "$cohort.bcf" ]; then
  "$tamis" simulate --out "$cohort" --samples "$samples" --variants "$variants" --seed 2026 \
    --families 0.3 --heritability 0.5 2>/dev/null
  bcftools view -Ob -o "$cohort.bcf" "$cohort.vcf.gz" && bcftools index "$cohort.bcf"
fi
start=$(date +%s.%N)
"$tamis" relatedness --genotypes "$cohort.bcf" --keep-above "$keep_above" --threads "$threads" --quiet \
  --out "$cohort"
echo "relatedness matrix: $(echo "$(date +%s.%N) - $start" | bc) s"

covariates=age,sex,village,pc1,pc2,pc3,pc4
run() {  # NAME EXTRA... ; prints "seconds peak_kb"
  local name=$1; shift
  local binary=$tamis
  [ "$name" = baseline ] && binary=$baseline
  /usr/bin/time -f "%e %M" -o "$data/$name.time" "$binary" scan --genotypes "$cohort.bcf" \
    --traits "$cohort.traits.tsv" --trait fev1_litres --covariates "$covariates" --threads "$threads" \
    --quiet --out "$data/$name" "$@"
  cat "$data/$name.time"
}
: > "$data/plain.times"; : > "$data/mixed.times"; : > "$data/baseline.times"
for round in $(seq "$rounds"); do
  run plain >> "$data/plain.times"
  run mixed --relatedness "$cohort.relatedness.tsv.gz" >> "$data/mixed.times"
  [ -z "$baseline" ] || run baseline --relatedness "$cohort.relatedness.tsv.gz" >> "$data/baseline.times"
done
grep "linear mixed model\|related groups" "$data/mixed.log"
median() { sort -g | awk '{ v[NR] = $1 } END { print (NR % 2) ? v[(NR + 1) / 2] : (v[NR / 2] + v[NR / 2 + 1]) / 2 }'; }
plain=$(cut -d' ' -f1 "$data/plain.times" | median)
mixed=$(cut -d' ' -f1 "$data/mixed.times" | median)
echo "samples $samples, variants $variants, threads $threads, rounds $rounds (BCF)"
echo "plain scan: median $plain s, peak $(cut -d' ' -f2 "$data/plain.times" | median) KB"
echo "mixed scan: median $mixed s, peak $(cut -d' ' -f2 "$data/mixed.times" | median) KB"
echo "mixed / plain: $(echo "scale=3; $mixed / $plain" | bc)"
if [ -n "$baseline" ]; then
  before=$(cut -d' ' -f1 "$data/baseline.times" | median)
  echo "baseline mixed scan ($baseline): median $before s, peak $(cut -d' ' -f2 "$data/baseline.times" | median) KB"
  echo "baseline / mixed: $(echo "scale=1; $before / $mixed" | bc)"
fi
