#!/usr/bin/env bash
# Simulates a cohort, scans it with tamis, and checks the results against R's
# stats package (see check_against_r.R). The binary score test is taken
# plain and refits unpenalised, the textbook tests R's glm gives; the
# saddlepoint and Firth versions are checked in tests/test_model_binary.cpp.
# Usage:
#   check_against_r.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-800}; variants=${4:-600}; seed=${5:-20261201}
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"; mkdir -p "$work"
"$tamis" simulate --out "$work/cohort" --samples "$samples" --variants "$variants" --seed "$seed" 2>/dev/null
covariates=age,sex,village,pc1,pc2,pc3,pc4
"$tamis" scan --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates "$covariates" \
  --confirm-below 1e-3 --binary-score plain --penalized-refit never \
  --out "$work/scan" --threads 2 --quiet
# Dosages of the biallelic sites, one row per variant (bcftools 1.16).
{
  printf 'chrom\tpos\tref\talt'; bcftools query -l "$work/cohort.vcf.gz" | sed 's/^/\t/' | tr -d '\n'; echo
  bcftools view -m2 -M2 "$work/cohort.vcf.gz" | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT[\t%DS]\n'
} > "$work/dosages.tsv"
Rscript "$here/check_against_r.R" "$work/dosages.tsv" "$work/cohort.traits.tsv" "$work/scan" \
  "$covariates" fev1_litres winter_wheeze
