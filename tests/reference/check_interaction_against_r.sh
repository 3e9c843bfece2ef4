#!/usr/bin/env bash
# Interaction scans (scan --interaction-with) against R: the refitted rows
# against R 4.2.2 lm/glm with g * E, sandwich::vcovHC and lmtest (Debian
# r-cran-sandwich, r-cran-lmtest), the linear score rows against their
# formulas; see check_interaction_against_r.R.
# Usage:
#   check_interaction_against_r.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-600}; variants=${4:-300}; seed=${5:-20261218}
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"; mkdir -p "$work"
"$tamis" simulate --out "$work/cohort" --samples "$samples" --variants "$variants" --chromosomes 1 --seed "$seed" 2>/dev/null
inputs=(--genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" --trait fev1_litres --trait winter_wheeze
        --confirm-below 0.2 --mac-floor 3 --threads 2 --quiet)
# (A variant carried by one sample has leverage 1 in the interaction model:
# its sandwich variance is singular up to rounding, and so are the tests.)
# A numeric exposure the covariates do not list (it joins them), HC0; a
# text one with three levels that they do list, HC3.
"$tamis" scan "${inputs[@]}" --covariates age,sex,village,pc2 --interaction-with pc1 --out "$work/numeric"
"$tamis" scan "${inputs[@]}" --covariates age,sex,village,pc1 --interaction-with village --robust-errors hc3 \
  --out "$work/text"
{
  printf 'chrom\tpos\tref\talt'; bcftools query -l "$work/cohort.vcf.gz" | sed 's/^/\t/' | tr -d '\n'; echo
  bcftools view -m2 -M2 "$work/cohort.vcf.gz" | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT[\t%DS]\n'
} > "$work/dosages.tsv"
Rscript "$here/check_interaction_against_r.R" "$work/dosages.tsv" "$work/cohort.traits.tsv" \
  "$work/numeric" age,sex,village,pc2,pc1 pc1 HC0
Rscript "$here/check_interaction_against_r.R" "$work/dosages.tsv" "$work/cohort.traits.tsv" \
  "$work/text" age,sex,village,pc1 village HC3
