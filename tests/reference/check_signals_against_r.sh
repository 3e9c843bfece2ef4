#!/usr/bin/env bash
# Conditioning (scan --condition-on) and the joint fit of `tamis signals`
# against R's stats package (lm, glm, anova): see check_signals_against_r.R.
# Tests are taken unpenalised and the binary score plain, the textbook tests
# R gives.
# Usage:
#   check_signals_against_r.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-600}; variants=${4:-400}; seed=${5:-20261217}
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"; mkdir -p "$work"
"$tamis" simulate --out "$work/cohort" --samples "$samples" --variants "$variants" --chromosomes 1 --seed "$seed" 2>/dev/null
covariates=age,sex,village,pc1,pc2
# Two common biallelic variants to condition on (bcftools 1.16).
conditions=$(bcftools view -m2 -M2 -q 0.2:minor "$work/cohort.vcf.gz" | bcftools query -f '%CHROM:%POS:%REF:%ALT\n' |
  sed -n '5p;40p' | paste -sd,)
first=${conditions%%,*}; second=${conditions##*,}
"$tamis" scan --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates "$covariates" \
  --condition-on "$first" --condition-on "$second" \
  --confirm-below 1 --binary-score plain --penalized-refit never \
  --out "$work/conditioned" --threads 2 --quiet
chromosome=$(bcftools query -f '%CHROM\n' "$work/cohort.vcf.gz" | head -1)
"$tamis" signals --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates "$covariates" \
  --region "$chromosome" --select-below 1e-3 --max-signals 4 --penalized-refit never \
  --out "$work/signals" --threads 2 --quiet
{
  printf 'chrom\tpos\tref\talt'; bcftools query -l "$work/cohort.vcf.gz" | sed 's/^/\t/' | tr -d '\n'; echo
  bcftools view -m2 -M2 "$work/cohort.vcf.gz" | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT[\t%DS]\n'
} > "$work/dosages.tsv"
Rscript "$here/check_signals_against_r.R" "$work/dosages.tsv" "$work/cohort.traits.tsv" "$work/conditioned" \
  "$work/signals" "$covariates" "$conditions" fev1_litres winter_wheeze
