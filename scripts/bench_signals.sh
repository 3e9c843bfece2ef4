#!/usr/bin/env bash
# Follow-up of lead loci by `tamis signals`: stepwise selection, joint fit
# and credible sets at LOCI (100) loci of +-500 kb on a cohort of SAMPLES
# (5000), at THREADS (2). Target: under a minute for 100 loci.
#
# Simulates the cohort once (VARIANTS 20000 on 4 chromosomes, some 100
# variants per 500 kb either side of a lead; kept in the data folder), and
# takes as leads LOCI biallelic records of minor allele frequency 5% or
# more (bcftools), spread evenly through the file, written as the loci file
# `tamis report` writes. Runs `signals` for
# the quantitative trait (fev1_litres) and for the binary one (winter_wheeze)
# ROUNDS (3) times each, interleaved, and prints the median wall times and
# peak memory (GNU time -v).
#
# The simulated cohort has some 100 variants per megabase whatever its size;
# WINDOW_KB (500) widens the windows to stand for denser data (5000: some
# 1,000 variants per window, as +-500 kb of imputed genotypes holds).
#
# Environment: SAMPLES, VARIANTS, LOCI, WINDOW_KB, ROUNDS, THREADS, TAMIS (the binary;
# default build/tamis), TAMIS_BENCH_DIR (data). Run it when the machine is
# otherwise idle: the figures are wall times.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
tamis=${TAMIS:-$root/build/tamis}
data=${TAMIS_BENCH_DIR:-$root/build/bench_signals}
samples=${SAMPLES:-5000}
variants=${VARIANTS:-20000}
loci=${LOCI:-100}
window_kb=${WINDOW_KB:-500}
rounds=${ROUNDS:-3}
threads=${THREADS:-2}
[ -x /usr/bin/time ] || { echo "GNU time is needed: apt-get install time" >&2; exit 1; }
command -v bcftools > /dev/null || { echo "bcftools is needed: apt-get install bcftools" >&2; exit 1; }
. "$root/scripts/bench_common.sh"
mkdir -p "$data"

cohort="$data/cohort_${samples}x${variants}"
if [ ! -e "$cohort.vcf.gz" ]; then
  "$tamis" simulate --out "$cohort" --samples "$samples" --variants "$variants" --chromosomes 4 --seed 1717 \
    > /dev/null 2>&1
fi
loci_file="$data/leads_${loci}.loci.tsv"
common=$(bcftools view -H -m2 -M2 -q 0.05:minor "$cohort.vcf.gz" | wc -l)
bcftools view -m2 -M2 -q 0.05:minor "$cohort.vcf.gz" | bcftools query -f '%CHROM\t%POS\t%REF\t%ALT\n' |
  awk -v loci="$loci" -v records="$common" '
  BEGIN {
    OFS = "\t"; step = int(records / loci)
    print "trait", "chromosome", "lead_position", "lead_variant_id", "lead_rsid", "p_value",
          "neg_log_10_p_value", "beta", "span_start", "span_end", "n_variants"
  }
  NR % step == 0 && written < loci {
    ++written
    for (trait = 1; trait <= 2; ++trait) {
      print (trait == 1 ? "fev1_litres" : "winter_wheeze"), $1, $2, $1 "_" $2 "_" $3 "_" $4, "#NA", "1e-9", "9",
            "0.1", $2, $2, 1
    }
  }' > "$loci_file"
echo "cohort: $samples samples, $variants variants; $(($(wc -l < "$loci_file") / 2)) lead loci per trait, +-$window_kb kb"

run_signals() {
  measure "$tamis" signals --genotypes "$cohort.vcf.gz" --traits "$cohort.traits.tsv" --trait "$1" \
    --covariates age,sex,village,pc1,pc2,pc3,pc4 --loci "$loci_file" --window-kb "$window_kb" --threads "$threads" --quiet \
    --out "$data/signals_$1"
}
: > "$data/times.tsv"
for round in $(seq "$rounds"); do
  for trait in fev1_litres winter_wheeze; do
    echo "$trait $(run_signals "$trait")" >> "$data/times.tsv"
  done
done
for trait in fev1_litres winter_wheeze; do
  wall=$(awk -v trait="$trait" '$1 == trait { print $2 }' "$data/times.tsv" | median)
  peak=$(awk -v trait="$trait" '$1 == trait { print $3 }' "$data/times.tsv" | median)
  signals=$(($(wc -l < "$data/signals_$trait.$trait.signals.tsv") - 1))
  echo "$trait: median wall time ${wall} s over $rounds rounds at $threads threads, peak memory ${peak} kB, $signals signals"
done
