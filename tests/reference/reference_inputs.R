# Shared by the reference checks: reading the dosages that `bcftools query`
# printed (CHROM, POS, REF, ALT, then one column per sample) and the trait table.

# VCF/BCF store Type=Float values as 32-bit IEEE floats (hts-specs VCF 4.3,
# section 1.6.1), so the references read the dosages at that precision too.
as_float32 <- function(x) readBin(writeBin(as.vector(x), raw(), size = 4), "double", size = 4, n = length(x))

# A list: info (the four site columns), geno (variants x samples, float32
# values, NA where missing), variant_id (CHROM_POS_REF_ALT) and samples.
read_query_dosages <- function(path) {
  dos <- read.delim(path, header = TRUE, check.names = FALSE, na.strings = ".", colClasses = "character")
  info <- dos[, 1:4]
  geno <- as.matrix(dos[, -(1:4)])
  suppressWarnings(storage.mode(geno) <- "double")
  geno[] <- as_float32(geno)
  list(info = info, geno = geno, variant_id = paste(info[, 1], info[, 2], info[, 3], info[, 4], sep = "_"),
       samples = colnames(geno))
}

# The trait table with the sample IDs (its first column) as row names.
read_trait_table <- function(path) {
  tab <- read.delim(path, header = TRUE, na.strings = c("NA", "na", "NaN", ".", ""),
                    stringsAsFactors = FALSE, check.names = FALSE)
  rownames(tab) <- tab[[1]]
  tab
}
