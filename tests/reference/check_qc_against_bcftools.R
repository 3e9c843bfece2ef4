# Compares tamis's effect_allele_frequency, call_rate and hwe_p, and the
# variants each floor keeps, with bcftools +fill-tags on the same samples.
# Tolerances: 1e-6 for frequency and call rate, 1e-4 relative for HWE p > 1e-10.
args <- commandArgs(trailingOnly = TRUE); work <- args[1]
ref <- read.delim(file.path(work, "bcftools.tsv"), header = FALSE, colClasses = "character",
                  col.names = c("chrom", "pos", "ref", "alt", "af", "hwe", "fmiss"))
ref$id <- paste(ref$chrom, ref$pos, ref$ref, ref$alt, sep = "_")
for (col in c("af", "hwe", "fmiss")) ref[[col]] <- as.numeric(ref[[col]])
read_results <- function(name) read.delim(gzfile(file.path(work, paste0(name, ".fev1_litres.tsv.gz"))),
                                          na.strings = "#NA", colClasses = c(variant_id = "character"))
all <- read_results("all")
m <- merge(all, ref, by.x = "variant_id", by.y = "id")
cat(sprintf("compared %d variants\n", nrow(m)))
stopifnot(nrow(m) > 100)
af_err <- max(abs(m$effect_allele_frequency - m$af))
cr_err <- max(abs(m$call_rate - (1 - m$fmiss)))
usable <- m$hwe > 1e-10
hwe_err <- max(abs(m$hwe_p[usable] - m$hwe[usable]) / m$hwe[usable])
cat(sprintf("effect_allele_frequency vs AF: max abs error %.3g (tolerance 1e-6)\n", af_err))
cat(sprintf("call_rate vs 1 - F_MISSING:    max abs error %.3g (tolerance 1e-6)\n", cr_err))
cat(sprintf("hwe_p vs HWE (p > 1e-10):      max rel error %.3g over %d variants (tolerance 1e-4)\n",
            hwe_err, sum(usable)))
ok <- af_err <= 1e-6 && cr_err <= 1e-6 && hwe_err <= 1e-4
# Each floor keeps exactly the variants that the reference values pass (among
# the variants the unfiltered run wrote, i.e. polymorphic in these samples).
check_floor <- function(name, keep) {
  kept <- read_results(name)$variant_id
  expected <- m$variant_id[keep]
  got <- intersect(kept, m$variant_id)
  same <- setequal(got, expected)
  cat(sprintf("floor %-9s keeps %d of %d variants; reference says %d: %s\n", name, length(got), nrow(m),
              length(expected), if (same) "same" else "DIFFERENT"))
  same
}
ok <- check_floor("maf", pmin(m$af, 1 - m$af) >= 0.05) && ok
ok <- check_floor("hwe", m$hwe >= 0.001) && ok
ok <- check_floor("callrate", 1 - m$fmiss >= 0.975) && ok
if (!ok) quit(status = 1)
cat("agreement with bcftools +fill-tags: all within tolerance\n")
