#!/usr/bin/env bash
# Checks `tamis scan --sets` against references outside the project: the
# burden test, the variance-component statistic and the eigenvalues of its
# null mixture against R's stats package (check_sets_against_r.R), and the
# variance-component p-values against Imhof's (1961) integral evaluated with
# mpmath (imhof_upper_tail.py).
#
# A simulated cohort (mostly rare variants, 1% of calls missing, rare-variant
# effects planted in 6 of its genes, so that some sets have small p) is kept to
# its biallelic records (bcftools view -m2 -M2); sets are windows of
# consecutive variants, as a BED file and as a list of chr:pos:ref:alt with
# weights. Four scans: BED with flat weights, BED with Beta(1, 25) weights,
# the list with its weights and --binary-score plain, and BED with flat
# weights over every variant (--set-maf-ceiling 0.5, which takes the common
# planted variants too) and --binary-score plain. Every scan takes every
# set's tails exactly (--set-exact-below 1): the default screen's saddlepoint
# and moment-matched tails are held to their own few percent in
# tests/test_set_accumulation.cpp, and sets below 1e-3 are exact either way.
# Usage:
#   check_sets_against_r.sh TAMIS WORKDIR [SAMPLES VARIANTS SEED [IMHOF_SETS]]
set -euo pipefail
tamis=$1; work=$2; samples=${3:-700}; variants=${4:-520}; seed=${5:-20261216}; imhof_sets=${6:-12}
here=$(cd "$(dirname "$0")" && pwd)
# Debian's interpreter, whose python3-mpmath is the reference named in the checks.
python=/usr/bin/python3
[ -x "$python" ] || python=python3
"$python" -c 'import mpmath' || { echo "mpmath is needed: apt-get install python3-mpmath" >&2; exit 1; }
rm -rf "$work"; mkdir -p "$work"
"$tamis" simulate --out "$work/cohort" --samples "$samples" --variants "$variants" --seed "$seed" \
  --rare-fraction 0.9 --causal-genes 6 2>/dev/null
bcftools view -m2 -M2 -Oz -o "$work/biallelic.vcf.gz" "$work/cohort.vcf.gz"

# Dosages, one row per variant (bcftools 1.16).
{
  printf 'chrom\tpos\tref\talt'; bcftools query -l "$work/biallelic.vcf.gz" | sed 's/^/\t/' | tr -d '\n'; echo
  bcftools query -f '%CHROM\t%POS\t%REF\t%ALT[\t%DS]\n' "$work/biallelic.vcf.gz"
} > "$work/dosages.tsv"

# Windows of 12 consecutive variants on one chromosome: BED (0-based start,
# half-open end, from the first variant's position - 1 to the last's) and a
# list of the same variants with weights between 0.5 and 2.5.
awk -F'\t' -v bed="$work/windows.bed" -v list="$work/windows.txt" '
  NR == 1 { next }
  $1 != chrom || in_window == 12 {
    if (in_window > 0) printf "%s\t%d\t%d\twindow_%03d\n", chrom, first - 1, last, window > bed
    window++; in_window = 0; chrom = $1; first = $2
  }
  {
    in_window++; last = $2
    printf "window_%03d\t%s:%s:%s:%s\t%.2f\n", window, $1, $2, $3, $4, 0.5 + ((NR * 37) % 101) / 50 > list
  }
  END { printf "%s\t%d\t%d\twindow_%03d\n", chrom, first - 1, last, window > bed }' "$work/dosages.tsv"

covariates=age,sex,village,pc1,pc2,pc3,pc4
scan() {  # OUT SETS WEIGHTS [more options]
  local out=$1 sets=$2 weights=$3
  shift 3
  "$tamis" scan --genotypes "$work/biallelic.vcf.gz" --traits "$work/cohort.traits.tsv" \
    --trait fev1_litres --trait winter_wheeze --covariates "$covariates" --confirm-below 0 \
    --sets "$sets" --set-weights "$weights" --set-exact-below 1 --out "$work/$out" --threads 2 --quiet "$@"
}
scan flat "$work/windows.bed" flat
scan beta "$work/windows.bed" beta
scan listed "$work/windows.txt" listed --binary-score plain
scan common "$work/windows.bed" flat --set-maf-ceiling 0.5 --binary-score plain

Rscript "$here/check_sets_against_r.R" "$work" "$covariates" "$imhof_sets" fev1_litres winter_wheeze
"$python" "$here/imhof_upper_tail.py" "$work/mixtures.tsv"
