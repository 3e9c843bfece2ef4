#!/usr/bin/env bash
# Scans a simulated family cohort with the linear mixed model of a random
# family intercept (relatedness 1 for every pair within a family) and checks
# the variance components, the score tests and the confirmation refits
# against R's lme4 (see check_mixed_against_lme4.R).
# Usage:
#   check_mixed_against_lme4.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-600}; variants=${4:-200}; seed=${5:-20261203}
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"; mkdir -p "$work"
"$tamis" simulate --out "$work/cohort" --samples "$samples" --variants "$variants" --seed "$seed" \
  --families 0.7 --heritability 0.5 --causal 2 2>/dev/null
# The random family intercept as a relatedness matrix: 1 within a family,
# 1 on the diagonal (unrelated samples are left out: their diagonal is 1).
awk -F'\t' 'NR > 1 && $5 != "ancestor" && $5 != "unrelated" { members[$1] = members[$1] " " $2 }
  END {
    print "sample_1\tsample_2\trelatedness"
    for (family in members) {
      n = split(members[family], ids, " ")
      for (a = 1; a <= n; ++a) for (b = a; b <= n; ++b) print ids[a] "\t" ids[b] "\t1"
    }
  }' "$work/cohort.families.tsv" > "$work/family_intercept.tsv"
covariates=age,sex,pc1,pc2
for threads in 1 3; do
  "$tamis" scan --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" \
    --trait fev1_litres --covariates "$covariates" --relatedness "$work/family_intercept.tsv" \
    --confirm-below 0.05 --out "$work/scan$threads" --threads "$threads" --quiet
done
cmp "$work/scan1.fev1_litres.tsv.gz" "$work/scan3.fev1_litres.tsv.gz"
{
  printf 'chrom\tpos\tref\talt'; bcftools query -l "$work/cohort.vcf.gz" | sed 's/^/\t/' | tr -d '\n'; echo
  bcftools view -m2 -M2 "$work/cohort.vcf.gz" | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT[\t%DS]\n'
} > "$work/dosages.tsv"
Rscript "$here/check_mixed_against_lme4.R" "$work/dosages.tsv" "$work/cohort.traits.tsv" \
  "$work/cohort.families.tsv" "$work/scan1" "$covariates" fev1_litres
