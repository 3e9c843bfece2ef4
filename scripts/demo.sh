#!/usr/bin/env bash
# The demo: installs what is missing, builds tamis, simulates the Saltmarsh
# Ridge cohort, scans both traits, and prints the top hits.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"
./scripts/install_dependencies.sh
cmake -S . -B build -DCMAKE_BUILD_TYPE=Release > /dev/null
cmake --build build -j "$(nproc)" --target tamis
out=demo_out
mkdir -p "$out"
# Haplotype blocks of about 20 variants give linkage disequilibrium; the
# first locus of fev1_litres has two causal variants in partial LD.
./build/tamis simulate --out "$out/saltmarsh" --samples 2000 --variants 3000 --seed 7 \
  --haplotype-blocks 20 --locus-signals 2
./build/tamis scan --genotypes "$out/saltmarsh.vcf.gz" --traits "$out/saltmarsh.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze \
  --covariates age,sex,village,pc1,pc2,pc3,pc4 \
  --genome-assembly GRCh38 --out "$out/scan"
# With the genotypes and the table, each lead locus gets a regional plot
# coloured by LD with its lead, measured on the trait's analysis samples.
./build/tamis report --results "$out/scan.fev1_litres.tsv.gz" "$out/scan.winter_wheeze.tsv.gz" \
  --out "$out/report" --genotypes "$out/saltmarsh.vcf.gz" --traits "$out/saltmarsh.traits.tsv" 2>/dev/null
for trait in fev1_litres winter_wheeze; do
  echo
  echo "== top hits for $trait (planted effects: $out/saltmarsh.truth.tsv)"
  # Columns: chromosome, position, effect and other allele, beta, SE, test, -log10 p.
  zcat "$out/scan.$trait.tsv.gz" | awk -F'\t' 'NR == 1 { print $1, $2, $3, $4, $5, $6, $14, $15; next }
    { print $1, $2, $3, $4, $5, $6, $14, $15 | "sort -k8,8gr | head -8" }' OFS='\t'
done
echo
echo "results:  $out/scan.fev1_litres.tsv.gz, $out/scan.winter_wheeze.tsv.gz (GWAS-SSF, tabix-indexed)"
echo "report:   $out/report.html (Manhattan and QQ plots, lead loci: $out/report.loci.tsv,"
echo "          regional plots: $out/report.fev1_litres.locus-1.png ..., their LD values: $out/report.locus_ld.tsv)"
echo "run log:  $out/scan.log"

# Independent signals at each lead locus: stepwise conditional selection, the
# joint fit of the selected variants, and a 95%/99% credible set per signal.
./build/tamis signals --genotypes "$out/saltmarsh.vcf.gz" --traits "$out/saltmarsh.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2,pc3,pc4 \
  --loci "$out/report.loci.tsv" --out "$out/signals" --quiet
echo
echo "== independent signals of fev1_litres (locus, signal, joint beta, SE, LR p, 95% set size)"
awk -F'\t' 'NR > 1 { print $2, $1, $8, $9, $11, $15 }' OFS='\t' "$out/signals.fev1_litres.signals.tsv"
# The regional plots again, now marking each signal's lead and its credible sets.
./build/tamis report --results "$out/scan.fev1_litres.tsv.gz" --out "$out/signals_report" \
  --genotypes "$out/saltmarsh.vcf.gz" --traits "$out/saltmarsh.traits.tsv" --signals-from "$out/signals" 2>/dev/null
echo "signals:  $out/signals.fev1_litres.signals.tsv, credible sets: $out/signals.fev1_litres.credible.tsv"
echo "          regional plots with the signals and credible sets marked: $out/signals_report.fev1_litres.locus-1.png ..."

# Variant sets. The same cohort with rare-variant effects planted in four of
# its genes (--causal-genes 4: about half of each gene's variants below 1%
# frequency act on both traits); every gene of its BED is tested as a set
# (burden, variance-component, optimal and Cauchy combinations), and the
# report adds the set-level plots and the top sets.
./build/tamis simulate --out "$out/gene_cohort" --samples 2000 --variants 3000 --seed 7 --causal-genes 4 2>/dev/null
./build/tamis scan --genotypes "$out/gene_cohort.vcf.gz" --traits "$out/gene_cohort.traits.tsv" \
  --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2,pc3,pc4 \
  --sets "$out/gene_cohort.genes.bed" --out "$out/sets" --quiet
./build/tamis report --results "$out/sets.fev1_litres.tsv.gz" "$out/sets.winter_wheeze.tsv.gz" \
  --out "$out/sets_report" 2>/dev/null
echo
echo "== variant sets: top genes per trait (planted in: $(awk -F'\t' 'NR > 1 && $5 != "#NA" { print $5 }' \
  "$out/gene_cohort.truth.tsv" | sort -u | paste -sd' '))"
# Columns: trait, set, chromosome, start, end, variants, overall p.
awk -F'\t' 'NR == 1 || ++shown[$1] <= 5 { print $1, $2, $3, $4, $5, $6, $12 }' OFS='\t' "$out/sets_report.top_sets.tsv"
echo "set results: $out/sets.fev1_litres.sets.tsv.gz, $out/sets.winter_wheeze.sets.tsv.gz (tabix-indexed)"
echo "set report:  $out/sets_report.html (set-level Manhattan and QQ plots; $out/sets_report.top_sets.tsv)"

# Related samples. A second cohort of the same villages in which half the
# residents live in families (parents, siblings, half-siblings, cousins) and
# both traits have a polygenic component of heritability 0.6 shared by
# relatives (winter wheeze on the logit liability scale): lung capacity gets
# the linear mixed model, winter wheeze the logistic one. The relatedness
# matrix comes from the genotypes; with only 3,000 markers, chance pairs
# reach 0.05, so the matrix keeps pairs from 0.1 on.
./build/tamis simulate --out "$out/families" --samples 2000 --variants 3000 --seed 7 \
  --families 0.5 --heritability 0.6 2>/dev/null
./build/tamis relatedness --genotypes "$out/families.vcf.gz" --keep-above 0.1 --out "$out/families" --quiet
for model in plain mixed; do
  matrix=()
  if [ "$model" = mixed ]; then matrix=(--relatedness "$out/families.relatedness.tsv.gz"); fi
  ./build/tamis scan --genotypes "$out/families.vcf.gz" --traits "$out/families.traits.tsv" \
    --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2,pc3,pc4 "${matrix[@]}" \
    --out "$out/families_$model" --quiet
  ./build/tamis report --results "$out/families_$model.fev1_litres.tsv.gz" \
    "$out/families_$model.winter_wheeze.tsv.gz" --out "$out/families_$model" 2>/dev/null
done
echo
echo "== related samples: genomic inflation in the family cohort (pedigree: $out/families.families.tsv)"
for model in plain mixed; do
  awk -F'\t' -v model="$model" 'NR > 1 { printf "%-6s scan of %-14s lambda_gc %.3f, %s lead loci\n", model, $1 ":", $3, $5 }' \
    "$out/families_$model.summary.tsv"
done
grep "^null model" "$out/families_mixed.log"
echo "relatedness: $out/families.relatedness.tsv.gz"
echo "mixed-model results: $out/families_mixed.fev1_litres.tsv.gz, $out/families_mixed.winter_wheeze.tsv.gz"
