# The dosage table the reference scripts read (sourced, not run): chrom, pos,
# ref, alt, then one DS value per sample, as `bcftools query` writes it, with
# a header line of sample IDs. Returns the dosages (variants x samples), read
# at the 32-bit precision VCF stores Type=Float values in (hts-specs VCF 4.3,
# 1.6.1), and each variant's chr_pos_ref_alt and chr:pos:ref:alt.
read_dosage_table <- function(path) {
  dos <- read.delim(path, header = TRUE, check.names = FALSE, na.strings = ".", colClasses = "character")
  info <- dos[, 1:4]
  geno <- as.matrix(dos[, -(1:4)])
  suppressWarnings(storage.mode(geno) <- "double")
  geno[] <- readBin(writeBin(as.vector(geno), raw(), size = 4), "double", size = 4, n = length(geno))
  list(geno = geno,
       variant_id = paste(info[, 1], info[, 2], info[, 3], info[, 4], sep = "_"),
       colon_id = paste(info[, 1], info[, 2], info[, 3], info[, 4], sep = ":"))
}
