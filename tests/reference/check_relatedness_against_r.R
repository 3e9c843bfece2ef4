# Reference check of `tamis relatedness` against an independent computation
# in base R (R 4.2.2 r-base-core: scale, tcrossprod), entry by entry.
#
# Usage: Rscript check_relatedness_against_r.R DOSAGES MAF_FLOOR CALL_RATE_FLOOR FILE...
#   DOSAGES  tab-separated: chrom, pos, ref, alt, then one DS value per sample
#            (from `bcftools query` on the biallelic records), header line
#            with the sample IDs
#   FILE     the relatedness file(s) tamis wrote with --keep-above below
#            every value, so that every pair is listed: one whole matrix or
#            every part of one
# The estimate (Yang et al. 2011, AJHG 88:76-82): A_jk is the mean over the
# markers both samples have of (x_j - 2p)(x_k - 2p) / (2p(1 - p)), p the mean
# dosage / 2 over the samples that have the marker. Markers are the biallelic
# records whose minor allele frequency and call rate reach the floors.
# Tolerance: 1e-10 absolute on every entry; marker counts exact.

args <- commandArgs(trailingOnly = TRUE)
dosage_path <- args[1]
maf_floor <- as.numeric(args[2]); call_rate_floor <- as.numeric(args[3])
tamis_files <- args[-(1:3)]
cat(R.version.string, "\n")

dos <- read.delim(dosage_path, header = TRUE, check.names = FALSE, na.strings = ".",
                  colClasses = "character")
geno <- as.matrix(dos[, -(1:4)])
suppressWarnings(storage.mode(geno) <- "double")
# VCF/BCF store Type=Float values as 32-bit IEEE floats (hts-specs VCF 4.3,
# section 1.6.1), so the reference reads the dosages at that precision too.
as_float32 <- function(x) readBin(writeBin(as.vector(x), raw(), size = 4), "double", size = 4, n = length(x))
geno[] <- as_float32(geno)
samples <- colnames(geno)
n <- length(samples)

called <- !is.na(geno)
p <- rowSums(geno, na.rm = TRUE) / (2 * rowSums(called))
markers <- pmin(p, 1 - p) >= maf_floor & rowSums(called) / n >= call_rate_floor & p > 0 & p < 1
cat("markers:", sum(markers), "of", nrow(geno), "biallelic records\n")

x <- t(geno[markers, , drop = FALSE])           # samples x markers
z <- scale(x, center = 2 * p[markers], scale = sqrt(2 * p[markers] * (1 - p[markers])))
z[is.na(z)] <- 0
has_call <- 1 * !is.na(x)
shared <- tcrossprod(has_call)
reference <- tcrossprod(z) / shared

rows <- do.call(rbind, lapply(tamis_files, function(path) {
  read.delim(path, header = TRUE, colClasses = c("character", "character", "character", "numeric", "character"))
}))
ours <- as.numeric(rows$relatedness)
first <- match(rows$sample_1, samples); second <- match(rows$sample_2, samples)
stopifnot(!anyNA(first), !anyNA(second))
key <- paste(pmin(first, second), pmax(first, second))
if (anyDuplicated(key)) stop("a pair is listed twice across the files")
if (nrow(rows) != n * (n + 1) / 2) stop(sprintf("%d rows, expected every pair: %d", nrow(rows), n * (n + 1) / 2))

deviation <- abs(ours - reference[cbind(first, second)])
cat(sprintf("entries: %d, largest deviation %.3g, diagonal mean %.6f\n", length(deviation), max(deviation),
            mean(diag(reference))))
if (max(deviation) > 1e-10) {
  worst <- which.max(deviation)
  stop(sprintf("%s - %s: tamis %.17g, R %.17g", rows$sample_1[worst], rows$sample_2[worst], ours[worst],
               reference[first[worst], second[worst]]))
}
count_mismatch <- sum(rows$shared_markers != shared[cbind(first, second)])
if (count_mismatch > 0) stop(sprintf("%d pairs with another count of shared markers", count_mismatch))

# Degree labels: kinship phi = A/2 against 2^-1.5, 2^-2.5, 2^-3.5, 2^-4.5
# (Manichaikul et al. 2010, Bioinformatics 26:2867-2873).
kinship <- reference[cbind(first, second)] / 2
expected <- ifelse(kinship >= 2^-1.5, "duplicate_or_twin", ifelse(kinship >= 2^-2.5, "first_degree",
             ifelse(kinship >= 2^-3.5, "second_degree", ifelse(kinship >= 2^-4.5, "third_degree", "beyond_third"))))
expected[first == second] <- "self"
near_cut <- abs(outer(kinship, 2^-c(1.5, 2.5, 3.5, 4.5), "-")) < 1e-10
label_mismatch <- sum(rows$relationship_degree != expected & rowSums(near_cut) == 0)
if (label_mismatch > 0) stop(sprintf("%d rows with another degree label", label_mismatch))
cat("relatedness matches R: every entry within 1e-10, shared marker counts and degree labels equal\n")
