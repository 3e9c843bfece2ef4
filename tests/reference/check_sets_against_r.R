# Reference check of `tamis scan --sets` against R's stats package.
#
# Usage: Rscript check_sets_against_r.R WORKDIR COVARIATES IMHOF_SETS TRAIT...
#   WORKDIR holds dosages.tsv (chrom, pos, ref, alt, one DS per sample, from
#   bcftools query), cohort.traits.tsv, windows.bed, windows.txt and the set
#   results flat.TRAIT.sets.tsv.gz, beta.TRAIT.sets.tsv.gz,
#   listed.TRAIT.sets.tsv.gz and common.TRAIT.sets.tsv.gz of
#   check_sets_against_r.sh.
# For every set it rebuilds, from the set file and the dosages, the variants
# tamis tests (minor allele frequency over the trait's analysis samples at
# most the scan's ceiling, not monomorphic), their weights and each missing dosage imputed
# by the variant's mean over those samples, and compares:
#   - n_variants, start, end and total_mac, exactly (1e-9 relative for the MAC);
#   - the burden b = G_minor w as a covariate: for a linear model the score
#     chi-square (b'r)^2 / (sigma^2 b'(I - H) b) with sigma^2 = RSS0/(n - p)
#     and r the residuals of lm(); its p-value (pchisq); burden_beta, which
#     is lm()'s coefficient of b added to the null model (the score's
#     one-step estimate is exact for least squares); for a logistic model the
#     Rao score statistic of anova(glm0, glm1, test = "Rao");
#   - Q = sum_j w_j^2 U_j^2 with U_j = g_j'(y - mu) (minor-allele coding);
#     for a binary trait with the saddlepoint, each U_j whose chi-square
#     U_j^2 / Phi_jj is at least 4 moved to sign(U_j) sqrt(Phi_jj
#     qchisq(p_j, 1, lower.tail = FALSE)), p_j the variant's own score_p in
#     tamis's results (its saddlepoint p-value), as the scan calibrates the
#     scores it tests;
#   - cauchy_p from the single-variant score p-values (pchisq of U_j^2 /
#     Phi_jj) by the Cauchy combination (Liu & Xie 2020, JASA 115:393-402)
#     with weights w^2 maf (1 - maf), and overall_p as the equal-weight
#     Cauchy combination of tamis's own four p-values;
# and writes, for the beta-weighted, listed and common-variant scans, Q and
# the eigenvalues of diag(w) Phi diag(w) (eigen()) to mixtures.tsv, for
# imhof_upper_tail.py.
# Reference: R's stats package (lm, glm, anova, pchisq, dbeta, qr, eigen),
# R 4.2.2 as printed below. Tolerances (relative): 1e-8 for linear models,
# 1e-6 for logistic ones (two IRLS fits that each stop at their own
# convergence criterion).

args <- commandArgs(trailingOnly = TRUE)
work <- args[1]
covariates <- strsplit(args[2], ",")[[1]]
imhof_sets <- as.integer(args[3])
traits <- args[-(1:3)]
cat(R.version.string, "\n")

dos <- read.delim(file.path(work, "dosages.tsv"), header = TRUE, check.names = FALSE, na.strings = ".",
                  colClasses = "character")
info <- data.frame(chrom = dos[[1]], pos = as.numeric(dos[[2]]), ref = dos[[3]], alt = dos[[4]])
geno <- as.matrix(dos[, -(1:4)])
suppressWarnings(storage.mode(geno) <- "double")
# VCF Type=Float values are 32-bit IEEE floats (hts-specs VCF 4.3, 1.6.1).
as_float32 <- function(x) readBin(writeBin(as.vector(x), raw(), size = 4), "double", size = 4, n = length(x))
geno[] <- as_float32(geno)
samples <- colnames(geno)
variant_key <- paste(info$chrom, info$pos, info$ref, info$alt, sep = ":")

tab <- read.delim(file.path(work, "cohort.traits.tsv"), header = TRUE, na.strings = c("NA", "na", "NaN", ".", ""),
                  stringsAsFactors = FALSE, check.names = FALSE)
rownames(tab) <- tab[[1]]

# The sets: members (row indices of the dosages), listed weights, extent.
bed <- read.delim(file.path(work, "windows.bed"), header = FALSE, colClasses = c("character", "numeric", "numeric",
                  "character"), col.names = c("chrom", "start", "end", "set"))
bed_sets <- lapply(seq_len(nrow(bed)), function(k) {
  members <- which(info$chrom == bed$chrom[k] & info$pos > bed$start[k] & info$pos <= bed$end[k])
  list(name = bed$set[k], members = members, weights = rep(NA_real_, length(members)),
       start = bed$start[k] + 1, end = bed$end[k])  # written 1-based, inclusive
})
listed <- read.delim(file.path(work, "windows.txt"), header = FALSE, colClasses = c("character", "character",
                     "numeric"), col.names = c("set", "variant", "weight"))
list_sets <- lapply(unique(listed$set), function(name) {
  rows <- listed[listed$set == name, ]
  members <- match(rows$variant, variant_key)
  stopifnot(!anyNA(members))
  list(name = name, members = members, weights = rows$weight, start = min(info$pos[members]),
       end = max(info$pos[members]))
})
# 0.01 is tamis's default --set-maf-ceiling; the "common" scan takes every
# variant (--set-maf-ceiling 0.5), planted common ones too, for small p.
# `plain`: run with --binary-score plain, where a binary trait's scores are
# tested as they are (with the saddlepoint, tamis moves them to the normal
# deviates of their saddlepoint p-values, taken here from its results).
runs <- list(list(prefix = "flat", sets = bed_sets, weighting = "flat", ceiling = 0.01, plain = FALSE),
             list(prefix = "beta", sets = bed_sets, weighting = "beta", ceiling = 0.01, plain = FALSE),
             list(prefix = "listed", sets = list_sets, weighting = "listed", ceiling = 0.01, plain = TRUE),
             list(prefix = "common", sets = bed_sets, weighting = "flat", ceiling = 0.5, plain = TRUE))

rel_err <- function(ours, ref) abs(ours - ref) / pmax(abs(ref), 1e-300)
worst <- list()
tolerance <- list()
note <- function(kind, field, value, limit) {
  key <- paste(kind, field)
  worst[[key]] <<- max(c(worst[[key]], value), na.rm = TRUE)
  tolerance[[key]] <<- limit
}

# The Cauchy combination (Liu & Xie 2020): T = sum w tan((1/2 - p) pi) / sum w,
# p = 1/2 - arctan(T) / pi; written with tan((1/2 - p) pi) = 1 / tan(p pi) and
# 1/2 - arctan(T) / pi = arctan(1 / T) / pi (T > 0) so that small p keep their digits.
cauchy_p <- function(p, w = rep(1, length(p))) {
  t <- sum(w / tan(p * pi)) / sum(w)
  if (t > 0) atan(1 / t) / pi else 0.5 - atan(t) / pi
}

mixture_rows <- NULL
for (trait in traits) {
  d <- tab[intersect(samples, rownames(tab)), c(trait, covariates)]
  d <- d[complete.cases(d), ]
  for (cv in covariates) if (is.character(d[[cv]])) d[[cv]] <- factor(d[[cv]])
  binary <- all(d[[trait]] %in% c(0, 1))
  kind <- if (binary) "logistic" else "linear"
  limit <- if (binary) 1e-6 else 1e-8
  form0 <- as.formula(paste(trait, "~", paste(covariates, collapse = " + ")))
  ctrl <- glm.control(epsilon = 1e-14, maxit = 100)
  m0 <- if (binary) glm(form0, data = d, family = binomial(), control = ctrl) else lm(form0, data = d)
  X <- model.matrix(m0)
  X <- X[, !is.na(coef(m0)), drop = FALSE]
  y <- d[[trait]]
  n <- nrow(X); p <- ncol(X)
  mu <- fitted(m0); r <- y - mu
  sigma2 <- sum(r^2) / (n - p)
  W <- if (binary) mu * (1 - mu) else rep(1, n)
  qr_x <- qr(X * sqrt(W))

  # Per variant over the analysis samples: frequency, the missing-dosage fill, variation.
  G <- geno[, rownames(d), drop = FALSE]
  called <- rowSums(!is.na(G))
  total <- rowSums(G, na.rm = TRUE)
  freq <- total / (2 * called)
  mac <- pmin(total, 2 * called - total)
  fill <- total / called
  varies <- rowSums(G^2, na.rm = TRUE) - fill * total > 1e-12 * called
  maf <- pmin(freq, 1 - freq)
  sign <- ifelse(freq > 0.5, -1, 1)
  G_imputed <- G
  G_imputed[is.na(G)] <- fill[row(G)[is.na(G)]]
  cat(sprintf("trait %s (%s): n = %d, p = %d, %d of %d variants below frequency 0.01\n", trait, kind, n, p,
              sum(varies & maf <= 0.01), nrow(G)))

  for (run in runs) {
    res <- read.delim(gzfile(file.path(work, paste0(run$prefix, ".", trait, ".sets.tsv.gz"))), header = TRUE,
                      na.strings = "#NA", stringsAsFactors = FALSE, colClasses = c(set = "character"))
    calibrated <- binary && !run$plain
    if (calibrated) {
      # The variants' saddlepoint p-values, by chr:pos:ref:alt (the effect allele is ALT).
      single <- read.delim(gzfile(file.path(work, paste0(run$prefix, ".", trait, ".tsv.gz"))), header = TRUE,
                           na.strings = "#NA", stringsAsFactors = FALSE, colClasses = "character")
      single_p <- setNames(as.numeric(single$score_p), paste(single$chromosome, single$base_pair_location,
                                                             single$other_allele, single$effect_allele, sep = ":"))
    }
    checked <- 0
    moved_sets <- 0
    eligible <- varies & maf <= run$ceiling
    for (set in run$sets) {
      keep <- eligible[set$members]
      idx <- set$members[keep]
      row <- res[res$set == set$name, ]
      if (length(idx) == 0) {
        if (nrow(row) != 0) stop(run$prefix, " ", trait, ": set ", set$name, " has no eligible variant but a row")
        next
      }
      if (nrow(row) != 1) stop(run$prefix, " ", trait, ": set ", set$name, " has ", nrow(row), " rows, expected 1")
      checked <- checked + 1
      stopifnot(row$n_variants == length(idx), row$start == set$start, row$end == set$end, row$n == n,
                row$weights == c(flat = "flat", beta = "beta_1_25", listed = "listed")[[run$weighting]])
      note(kind, "total_mac", rel_err(row$total_mac, sum(mac[idx])), 1e-8)  # nine digits written

      # Minor-allele coding: a variant whose ALT is the major allele counts 2 - g.
      g <- t(G_imputed[idx, , drop = FALSE])
      minor <- sweep(g, 2, sign[idx] == -1, function(x, flip) ifelse(flip, 2 - x, x))
      signed <- sweep(g, 2, sign[idx], "*")
      w <- switch(run$weighting, flat = rep(1, length(idx)), beta = dbeta(maf[idx], 1, 25),
                  listed = set$weights[keep])
      b <- drop(minor %*% w)

      # The burden as a covariate of the null model.
      if (binary) {
        m0x <- glm(y ~ X - 1, family = binomial(), control = ctrl)
        m1x <- suppressWarnings(glm(y ~ X - 1 + b, family = binomial(), control = ctrl))  # rare carriers: fitted 0 or 1
        rao <- anova(m0x, m1x, test = "Rao")$Rao[2]
        # Relative to at least 1e-4: for a burden score U near 0 the two
        # fits' last digits of U dominate the tiny statistic (seen: 3.6e-10
        # against 3.6e-10, 7e-15 apart).
        note(kind, "burden_chisq (anova Rao)", abs(row$burden_chisq - rao) / max(rao, 1e-4), limit)
        # Below chi-square 4 the p-value is the normal one; above it (and
        # with the saddlepoint) only the plain scan's is comparable.
        if (rao < 4 || run$plain) {
          note(kind, "burden_p (pchisq of Rao)", rel_err(row$burden_p, pchisq(rao, 1, lower.tail = FALSE)), limit)
        }
        stopifnot(row$burden_test == if (run$plain) "score" else "score_spa")
      } else {
        residual_b <- qr.resid(qr_x, b)
        chisq <- sum(b * r)^2 / (sigma2 * sum(residual_b^2))
        note(kind, "burden_chisq", rel_err(row$burden_chisq, chisq), limit)
        note(kind, "burden_p", rel_err(row$burden_p, pchisq(chisq, 1, lower.tail = FALSE)), limit)
        fit <- lm.fit(cbind(X, b), y)
        note(kind, "burden_beta (lm)", rel_err(row$burden_beta, unname(fit$coefficients["b"])), limit)
        note(kind, "burden_se", rel_err(row$burden_se, sqrt(sigma2 / sum(residual_b^2))), limit)
        stopifnot(row$burden_test == "score")
      }

      # Scores and their covariance: sigma^2 G'(I - H)G, or G'(W - WX(X'WX)^-1X'W)G.
      u <- drop(crossprod(signed, r))
      adjusted <- qr.resid(qr_x, signed * sqrt(W))
      phi <- crossprod(adjusted) * (if (binary) 1 else sigma2)
      if (calibrated) {
        spa_p <- single_p[variant_key[idx]]
        stopifnot(!anyNA(spa_p))
        moved <- u^2 / diag(phi) >= 4
        u[moved] <- sign(u[moved]) * sqrt(diag(phi)[moved] * qchisq(spa_p[moved], 1, lower.tail = FALSE))
        moved_sets <- moved_sets + any(moved)
      }
      q <- sum(w^2 * u^2)
      # A calibrated Q carries the nine digits of the written p-values.
      note(kind, if (calibrated) "variance_q (saddlepoint-calibrated scores)" else "variance_q", rel_err(row$variance_q, q),
           if (calibrated) 1e-6 else limit)

      normal_p <- pchisq(u^2 / diag(phi), 1, lower.tail = FALSE)
      if (!calibrated && all(normal_p < 1 - 1e-12)) {
        note(kind, "cauchy_p", rel_err(row$cauchy_p, cauchy_p(normal_p, w^2 * maf[idx] * (1 - maf[idx]))), limit)
      }
      note(kind, "overall_p (Cauchy of the four)",
           rel_err(row$overall_p, cauchy_p(c(row$burden_p, row$variance_p, row$optimal_p, row$cauchy_p))), 1e-6)

      if (run$prefix != "flat") {
        lambda <- eigen(phi * outer(w, w), symmetric = TRUE, only.values = TRUE)$values
        mixture_rows <- rbind(mixture_rows, data.frame(
          trait = trait, set = set$name, variance_method = row$variance_method,
          variance_p = sprintf("%.17g", row$variance_p), p = row$variance_p, q = sprintf("%.17g", q),
          eigenvalues = paste(sprintf("%.17g", lambda), collapse = ",")))
      }
    }
    if (checked < 10) stop(run$prefix, " ", trait, ": only ", checked, " sets checked")
    cat(sprintf("  %s: %d sets checked%s\n", run$prefix, checked,
                if (calibrated) sprintf(", %d with a saddlepoint-calibrated score", moved_sets) else ""))
  }
}
# For Imhof's integral (slow in mpmath): per trait the IMHOF_SETS / 2 sets
# of smallest variance_p above 1e-10 (the planted genes' among them) and as
# many in the file's order.
chosen <- do.call(rbind, lapply(split(mixture_rows, mixture_rows$trait), function(rows) {
  rows <- rows[!duplicated(rows[, c("set", "q", "eigenvalues")]), ]  # a set's rare variants: the same in two scans
  small <- head(rows[order(rows$p), ][rows$p[order(rows$p)] > 1e-10, ], imhof_sets %/% 2)
  rbind(small, head(rows[!rows$set %in% small$set, ], imhof_sets - nrow(small)))
}))
write.table(chosen[, c("trait", "set", "variance_method", "variance_p", "q", "eigenvalues")],
            file.path(work, "mixtures.tsv"), sep = "\t", quote = FALSE, row.names = FALSE)

failed <- FALSE
for (key in names(worst)) {
  ok <- worst[[key]] <= tolerance[[key]]
  if (!ok) failed <- TRUE
  cat(sprintf("%-40s max relative error %.3g (tolerance %g) %s\n", key, worst[[key]], tolerance[[key]],
              if (ok) "ok" else "FAILED"))
}
if (failed) quit(status = 1)
cat("set tests agree with R stats: all within tolerance\n")
