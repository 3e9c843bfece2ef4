#!/usr/bin/env bash
# Simulates a cohort with haplotype blocks, scans two traits with a sample
# list, draws the regional plots, and checks every r^2 of OUT.locus_ld.tsv
# against R's cor() on the dosages of each trait's analysis samples (see
# check_regional_ld_against_r.R).
# Usage:
#   check_regional_ld_against_r.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-700}; variants=${4:-800}; seed=${5:-20261203}
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"; mkdir -p "$work"
"$tamis" simulate --out "$work/cohort" --samples "$samples" --variants "$variants" --chromosomes 2 \
  --haplotype-blocks 12 --seed "$seed" 2>/dev/null
covariates=age,sex,village,pc1,pc2,pc3,pc4
# Every 9th sample left out, so that the analysis samples are not the table's.
bcftools query -l "$work/cohort.vcf.gz" | awk 'NR % 9 == 0' > "$work/drop.txt"
"$tamis" scan --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates "$covariates" --drop-samples "$work/drop.txt" \
  --out "$work/scan" --threads 2 --quiet
"$tamis" report --results "$work/scan.fev1_litres.tsv.gz" "$work/scan.winter_wheeze.tsv.gz" \
  --out "$work/report" --lead-below 1e-3 --locus-radius-kb 300 --regional-plots 4 \
  --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" --drop-samples "$work/drop.txt" 2>/dev/null
# Dosages (DS) of the biallelic sites, one row per variant (bcftools 1.16).
{
  printf 'chrom\tpos\tref\talt'; bcftools query -l "$work/cohort.vcf.gz" | sed 's/^/\t/' | tr -d '\n'; echo
  bcftools view -m2 -M2 "$work/cohort.vcf.gz" | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT[\t%DS]\n'
} > "$work/dosages.tsv"
Rscript "$here/check_regional_ld_against_r.R" "$work/dosages.tsv" "$work/cohort.traits.tsv" "$work/drop.txt" \
  "$covariates" "$work/report.locus_ld.tsv"
