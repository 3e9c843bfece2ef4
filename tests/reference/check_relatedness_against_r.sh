#!/usr/bin/env bash
# Simulates a cohort, builds its relatedness matrix with tamis (whole, and
# in 3 parts), and checks every entry against base R (see
# check_relatedness_against_r.R). Run twice: with the usual 1% missing
# calls, and with 30% and no call-rate floor, so that both ways of counting
# the markers a pair shares are taken.
# Usage:
#   check_relatedness_against_r.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-600}; variants=${4:-1200}; seed=${5:-20261203}
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"; mkdir -p "$work"

check() {  # NAME MISSING_RATE MAF_FLOOR CALL_RATE_FLOOR
  local cohort="$work/$1"
  "$tamis" simulate --out "$cohort" --samples "$samples" --variants "$variants" --seed "$seed" \
    --missing-rate "$2" --families 0.3 2>/dev/null
  local floors=(--maf-floor "$3" --call-rate-floor "$4" --keep-above -1e9 --threads 2 --quiet)
  "$tamis" relatedness --genotypes "$cohort.vcf.gz" --out "$cohort.whole" "${floors[@]}"
  for part in 1 2 3; do
    "$tamis" relatedness --genotypes "$cohort.vcf.gz" --out "$cohort.split" --part "$part/3" "${floors[@]}"
  done
  # Dosages of the biallelic records, one row per record (bcftools 1.16).
  {
    printf 'chrom\tpos\tref\talt'; bcftools query -l "$cohort.vcf.gz" | sed 's/^/\t/' | tr -d '\n'; echo
    bcftools view -m2 -M2 "$cohort.vcf.gz" | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT[\t%DS]\n'
  } > "$cohort.dosages.tsv"
  echo "== $1: missing rate $2, whole matrix"
  Rscript "$here/check_relatedness_against_r.R" "$cohort.dosages.tsv" "$3" "$4" "$cohort.whole.relatedness.tsv.gz"
  echo "== $1: missing rate $2, three parts"
  Rscript "$here/check_relatedness_against_r.R" "$cohort.dosages.tsv" "$3" "$4" \
    "$cohort".split.relatedness.part{1,2,3}-of-3.tsv.gz
}
check usual 0.01 0.01 0.95
check sparse_calls 0.3 0.01 0
