#!/usr/bin/env bash
# Runs scripts/workflow/Snakefile with 4 shards on a small simulated cohort
# under `snakemake --cores 2` and checks that the merged results equal the
# same scan run whole (decompressed, byte for byte), and that the 3 parts of
# the relatedness matrix hold the rows of the whole matrix; then the same
# with the mixed models (mixed_model: true, a matrix in 2 parts; linear for
# fev1_litres, logistic for winter_wheeze).
# Usage: check_workflow.sh TAMIS WORKDIR
set -euo pipefail
tamis=$(realpath "$1"); work=$2
root=$(cd "$(dirname "$0")/../.." && pwd)
rm -rf "$work"; mkdir -p "$work"; work=$(realpath "$work")
"$tamis" simulate --out "$work/cohort" --samples 600 --variants 1500 --chromosomes 4 --seed 31 2>/dev/null
cat > "$work/config.yaml" <<YAML
tamis: $tamis
genotypes: [$work/cohort.vcf.gz]
traits_table: $work/cohort.traits.tsv
traits: [fev1_litres, winter_wheeze]
covariates: [age, sex, village, pc1, pc2]
shards: 4
out: $work/sharded/cohort
extra: "--genome-assembly GRCh38"
relatedness_parts: 3
YAML
snakemake -s "$root/scripts/workflow/Snakefile" --configfile "$work/config.yaml" --cores 2 \
  --directory "$work" --quiet > "$work/snakemake.out" 2>&1 || { cat "$work/snakemake.out"; exit 1; }
"$tamis" scan --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2 \
  --genome-assembly GRCh38 --out "$work/whole" --quiet
for trait in fev1_litres winter_wheeze; do
  cmp <(zcat "$work/whole.$trait.tsv.gz") <(zcat "$work/sharded/cohort.$trait.tsv.gz")
  echo "$trait: 4-shard workflow equals the whole run"
done
test -s "$work/sharded/cohort.report.html"
"$tamis" relatedness --genotypes "$work/cohort.vcf.gz" --out "$work/whole" --quiet
cmp <(zcat "$work/whole.relatedness.tsv.gz" | tail -n +2 | sort) \
    <(for part in 1 2 3; do zcat "$work/sharded/cohort_relatedness/matrix.relatedness.part$part-of-3.tsv.gz" | tail -n +2; done | sort)
echo "relatedness: 3 parts hold the rows of the whole matrix"
# The mixed model: shards scanning with the parts equal a whole scan with them.
sed -e "s#^out: .*#out: $work/mixed/cohort#" \
  -e 's/^relatedness_parts: .*/relatedness_parts: 2/' "$work/config.yaml" > "$work/mixed.yaml"
echo "mixed_model: true" >> "$work/mixed.yaml"
snakemake -s "$root/scripts/workflow/Snakefile" --configfile "$work/mixed.yaml" --cores 2 \
  --directory "$work" --quiet > "$work/snakemake_mixed.out" 2>&1 || { cat "$work/snakemake_mixed.out"; exit 1; }
"$tamis" scan --genotypes "$work/cohort.vcf.gz" --traits "$work/cohort.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2 --genome-assembly GRCh38 --quiet \
  --relatedness "$work"/mixed/cohort_relatedness/matrix.relatedness.part{1,2}-of-2.tsv.gz --out "$work/whole_mixed"
for trait in fev1_litres winter_wheeze; do
  cmp <(zcat "$work/whole_mixed.$trait.tsv.gz") <(zcat "$work/mixed/cohort.$trait.tsv.gz")
done
grep -q "linear mixed model" "$work/whole_mixed.log"
grep -q "logistic mixed model" "$work/whole_mixed.log"
echo "mixed model: 4-shard workflow with the 2-part matrix equals the whole run"
echo "workflow ok"
