#!/usr/bin/env bash
# Interaction scan of a quantitative trait against the plain scan of the same
# trait: `scan --interaction-with` (score test of the interaction with a
# numeric exposure, HC0 sandwich variance, per-variant projections) against
# `scan`, both with the same covariates and no refits, on SAMPLES (5000) x
# VARIANTS (20000) as BCF, THREADS (2). Target: at most 2 x the plain scan.
#
# Simulates the cohort once (kept in the data folder), converts it to BCF
# (bcftools), then runs the two scans ROUNDS (5) times each, interleaved,
# and prints the median wall time of each and their ratio (GNU time -v).
#
# Environment: SAMPLES, VARIANTS, ROUNDS, THREADS, EXPOSURE (pc1; a text
# covariate such as village tests its levels), ROBUST (hc0), TAMIS (the
# binary; default build/tamis), TAMIS_BENCH_DIR (data). Run it when the
# machine is otherwise idle: the figures are wall times.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
tamis=${TAMIS:-$root/build/tamis}
data=${TAMIS_BENCH_DIR:-$root/build/bench_interaction}
samples=${SAMPLES:-5000}
variants=${VARIANTS:-20000}
rounds=${ROUNDS:-5}
threads=${THREADS:-2}
exposure=${EXPOSURE:-pc1}
robust=${ROBUST:-hc0}
[ -x /usr/bin/time ] || { echo "GNU time is needed: apt-get install time" >&2; exit 1; }
command -v bcftools > /dev/null || { echo "bcftools is needed: apt-get install bcftools" >&2; exit 1; }
. "$root/scripts/bench_common.sh"
mkdir -p "$data"

cohort="$data/cohort_${samples}x${variants}"
if [ ! -e "$cohort.bcf" ]; then
  "$tamis" simulate --out "$cohort" --samples "$samples" --variants "$variants" --seed 1818 > /dev/null 2>&1
  bcftools view -Ob -o "$cohort.bcf" "$cohort.vcf.gz"
fi
common=(--genotypes "$cohort.bcf" --traits "$cohort.traits.tsv" --trait fev1_litres
        --covariates age,sex,village,pc1,pc2,pc3,pc4 --confirm-below 0 --threads "$threads" --quiet)
echo "cohort: $samples samples, $variants variants (BCF), $threads threads, exposure $exposure, $robust"

plain_times=(); interaction_times=()
for round in $(seq "$rounds"); do
  read -r wall _ < <(measure "$tamis" scan "${common[@]}" --out "$data/plain")
  plain_times+=("$wall")
  read -r wall _ < <(measure "$tamis" scan "${common[@]}" --interaction-with "$exposure" --robust-errors "$robust" \
    --out "$data/interaction")
  interaction_times+=("$wall")
  echo "round $round: plain ${plain_times[-1]} s, interaction $wall s"
done
plain=$(printf '%s\n' "${plain_times[@]}" | median)
interaction=$(printf '%s\n' "${interaction_times[@]}" | median)
awk -v p="$plain" -v i="$interaction" 'BEGIN {
  printf "median wall time: plain scan %.2f s, interaction scan %.2f s; ratio %.2f (target <= 2)\n", p, i, i / p }'
