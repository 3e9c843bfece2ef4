#!/usr/bin/env bash
# Checks tamis's per-trait variant QC columns and floors against bcftools
# +fill-tags (AF, HWE, F_MISSING) run on the same analysis samples.
# Usage: check_qc_against_bcftools.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-500}; variants=${4:-800}; seed=${5:-515}
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"; mkdir -p "$work"
"$tamis" simulate --out "$work/c" --samples "$samples" --variants "$variants" --seed "$seed" \
  --missing-rate 0.03 2>/dev/null
scan() { "$tamis" scan --genotypes "$work/c.vcf.gz" --traits "$work/c.traits.tsv" --trait fev1_litres \
  --covariates age,sex --dosage-from GT --confirm-below 0 --quiet --threads 2 "$@"; }
scan --out "$work/all"
scan --out "$work/maf" --maf-floor 0.05
scan --out "$work/hwe" --hwe-floor 0.001
scan --out "$work/callrate" --call-rate-floor 0.975
# The analysis samples: genotyped, with the trait and both covariates.
bcftools query -l "$work/c.vcf.gz" | sort > "$work/genotyped.txt"
awk -F'\t' 'NR > 1 && $2 != "NA" && $3 != "NA" && $9 != "NA" {print $1}' "$work/c.traits.tsv" | sort \
  | comm -12 - "$work/genotyped.txt" > "$work/analysis_samples.txt"
# bcftools 1.16: biallelic sites, restricted to those samples, tags recomputed.
bcftools view -m2 -M2 -S "$work/analysis_samples.txt" -Ou "$work/c.vcf.gz" \
  | bcftools +fill-tags -Ou -- -t AF,HWE,F_MISSING \
  | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT\t%INFO/AF\t%INFO/HWE\t%INFO/F_MISSING\n' > "$work/bcftools.tsv"
bcftools --version | head -1
Rscript "$here/check_qc_against_bcftools.R" "$work"
