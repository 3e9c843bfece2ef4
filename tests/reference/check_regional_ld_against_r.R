# Every r^2 of report's locus_ld.tsv against R 4.2.2 stats::cor() on the
# dosages of the trait's analysis samples: samples in the genotype files and
# the table, not on the drop list, with the trait and every covariate
# present; a variant's missing dosages replaced by its mean over them.
args <- commandArgs(trailingOnly = TRUE)
dosages <- read.delim(args[1], check.names = FALSE, na.strings = ".", colClasses = c(chrom = "character"))
table <- read.delim(args[2], na.strings = c("NA", "na", "NaN", ".", ""), check.names = FALSE)
dropped <- readLines(args[3])
covariates <- strsplit(args[4], ",")[[1]]
ld <- read.delim(args[5], na.strings = "#NA", colClasses = c(chromosome = "character"))

# VCF/BCF hold Type=Float values as 32-bit IEEE floats (hts-specs VCF 4.3),
# which is what tamis reads; bcftools prints them in short decimal form, so
# R rounds them back to 32 bits, as check_against_r.R does.
as_float32 <- function(x) readBin(writeBin(as.vector(x), raw(), size = 4), "double", size = 4, n = length(x))
ids <- paste(dosages$chrom, dosages$pos, dosages$ref, dosages$alt, sep = "_")
genotype_samples <- colnames(dosages)[-(1:4)]
worst <- 0; checked <- 0; skipped <- 0
for (trait in unique(ld$trait)) {
  complete <- complete.cases(table[, c(trait, covariates)])
  samples <- intersect(genotype_samples, setdiff(table[[1]][complete], dropped))
  impute <- function(id) {
    values <- as_float32(as.numeric(dosages[match(id, ids), samples]))
    values[is.na(values)] <- mean(values, na.rm = TRUE)
    values
  }
  rows <- ld[ld$trait == trait, ]
  for (lead in unique(rows$lead_variant_id)) {
    lead_dosages <- impute(lead)
    for (row in which(rows$lead_variant_id == lead)) {
      id <- rows$variant_id[row]
      if (is.na(match(id, ids))) { skipped <- skipped + 1; next }  # multi-allelic: not in the biallelic table
      reference <- suppressWarnings(cor(lead_dosages, impute(id))^2)
      reported <- rows$r2_with_lead[row]
      if (is.na(reference) != is.na(reported)) stop(sprintf("%s %s: r2 %s, R %s", trait, id, reported, reference))
      if (!is.na(reference)) worst <- max(worst, abs(reported - reference))
      checked <- checked + 1
    }
  }
}
cat(sprintf("regional LD: %d r2 values checked against R cor()^2 (%d multi-allelic skipped), largest difference %.3g\n",
            checked, skipped, worst))
if (checked < 100) stop("too few r2 values to check")
if (worst > 1e-10) stop(sprintf("r2 differs from R by %.3g (tolerance 1e-10)", worst))
