# Reference check of conditioning and of the joint fit against R's stats
# package (lm, glm, anova); the R version is printed first.
#
# Usage: Rscript check_signals_against_r.R DOSAGES TABLE CONDITIONED SIGNALS COVARIATES CONDITIONS TRAIT...
#   DOSAGES      chrom, pos, ref, alt, then one DS value per sample (bcftools query)
#   CONDITIONED  prefix of `scan --condition-on A --condition-on B --confirm-below 1`
#   SIGNALS      prefix of `signals --region CHR`
#   CONDITIONS   the conditioning variants, chr:pos:ref:alt, comma-separated
# Conditioning: every row's score, Wald and LR results equal those of lm/glm
# with the conditioning dosages (mean-imputed over the analysis samples) as
# covariates: logistic score and LR from anova(test = "Rao") and
# anova(test = "LRT"); linear LR as 2 (l1 - l0) = n log(RSS0/RSS1) and the
# linear score from its formula with the null model's sigma^2, as tamis
# defines it (R's Rao test for a Gaussian glm scales by the larger model's
# dispersion instead).
# Joint fit: each signal's joint beta, SE and Wald p equal summary() of the
# model with every selected variant of its locus; its joint LR p equals the
# LR test of dropping it; its conditional p equals the score test of it
# given the other signals.
# Tolerances (relative): 1e-8 linear, 1e-6 logistic.

args <- commandArgs(trailingOnly = TRUE)
dosage_path <- args[1]; table_path <- args[2]; conditioned <- args[3]; signals <- args[4]
covariates <- strsplit(args[5], ",")[[1]]
conditions <- strsplit(args[6], ",")[[1]]
traits <- args[-(1:6)]
cat(R.version.string, "\n")

script_dir <- dirname(sub("^--file=", "", grep("^--file=", commandArgs(trailingOnly = FALSE), value = TRUE)))
source(file.path(script_dir, "dosage_table.R"))
dosages <- read_dosage_table(dosage_path)
geno <- dosages$geno; variant_id <- dosages$variant_id; colon_id <- dosages$colon_id
samples <- colnames(geno)
tab <- read.delim(table_path, header = TRUE, na.strings = c("NA", "na", "NaN", ".", ""),
                  stringsAsFactors = FALSE, check.names = FALSE)
rownames(tab) <- tab[[1]]

worst <- list()
# `floor` bounds the scale from below: R's LR statistic is a difference of
# two deviances near 1000 (logistic) or n times the log of a ratio of two
# residual sums of squares near 1 (linear), which keeps some 1e-13 to 1e-11
# absolute, so a statistic below 1 is compared absolutely (its p-value is
# compared relatively all the same).
note <- function(kind, field, ours, ref, floor = 1e-300) {
  key <- paste(kind, field)
  worst[[key]] <<- max(c(worst[[key]], abs(ours - ref) / pmax(abs(ref), floor)), na.rm = TRUE)
}
imputed <- function(id, rows, ids = variant_id) {
  g <- geno[match(id, ids), rows]
  g[is.na(g)] <- mean(g, na.rm = TRUE)
  g
}
ctrl <- glm.control(epsilon = 1e-14, maxit = 100)
fit <- function(form, d, binary) if (binary) glm(form, data = d, family = binomial(), control = ctrl) else lm(form, data = d)
# The score test of the last term of m1 under m0, from its formula.
score_stat <- function(m0, g, binary) {
  X <- model.matrix(m0); X <- X[, !is.na(coef(m0)), drop = FALSE]
  mu <- fitted(m0); r <- m0$model[[1]] - mu
  n <- length(r)
  w <- if (binary) mu * (1 - mu) else rep(sum(r^2) / (n - ncol(X)), n)
  WX <- X * w
  V <- sum(w * g^2) - drop(t(g * w) %*% X %*% solve(crossprod(X, WX), crossprod(WX, g)))
  sum(g * r)^2 / V
}
# 2 (l1 - l0): for lm, n log(RSS0 / RSS1), which keeps a small statistic's
# digits that a difference of the two logLik values would cancel.
lr_stat <- function(m0, m1) {
  if (inherits(m1, "glm")) return(deviance(m0) - deviance(m1))
  length(residuals(m1)) * log(deviance(m0) / deviance(m1))
}

for (trait in traits) {
  res <- read.delim(gzfile(paste0(conditioned, ".", trait, ".tsv.gz")), header = TRUE, na.strings = "#NA",
                    stringsAsFactors = FALSE, colClasses = c(variant_id = "character"))
  binary <- !is.na(res$n_cases[1])
  kind <- if (binary) "logistic" else "linear"
  d <- tab[intersect(samples, rownames(tab)), c(trait, covariates)]
  d <- d[complete.cases(d), ]
  for (cv in covariates) if (is.character(d[[cv]])) d[[cv]] <- factor(d[[cv]])
  for (k in seq_along(conditions)) d[[paste0("condition", k)]] <- imputed(conditions[k], rownames(d), colon_id)
  form0 <- as.formula(paste(trait, "~", paste(c(covariates, paste0("condition", seq_along(conditions))), collapse = " + ")))
  m0 <- fit(form0, d, binary)
  rows <- res[res$variant_id %in% variant_id & res$test != "score", ]
  skipped <- 0
  cat(sprintf("conditioning, trait %s (%s): n = %d, %d rows refitted\n", trait, kind, nrow(d), nrow(rows)))
  if (nrow(rows) < 50) stop("too few rows to check for ", trait)
  for (k in seq_len(nrow(rows))) {
    row <- rows[k, ]
    stopifnot(row$n == nrow(d))
    d$tamis_g <- imputed(row$variant_id, rownames(d))
    m1 <- suppressWarnings(fit(update(form0, . ~ . + tamis_g), d, binary))
    # A separated rare variant has no finite maximum: R and tamis stop at
    # different points on the way out, so there is nothing to compare.
    if (binary && min(fitted(m1), 1 - fitted(m1)) < 1e-8) {
      skipped <- skipped + 1
      next
    }
    est <- summary(m1)$coefficients["tamis_g", ]
    if (binary) {
      # As in check_against_r.R: the SE from the Fisher information at the
      # fitted values, not from the weights of glm's last IRLS step.
      X1 <- model.matrix(m1); mu1 <- fitted(m1)
      est[2] <- sqrt(solve(crossprod(X1, X1 * (mu1 * (1 - mu1))))["tamis_g", "tamis_g"])
      est[4] <- pchisq((est[1] / est[2])^2, 1, lower.tail = FALSE)
    }
    note(kind, "beta", row$beta, est[1])
    note(kind, "standard_error", row$standard_error, est[2])
    note(kind, "wald_p", row$wald_p, if (binary) est[4] else 2 * pt(-abs(est[3]), df.residual(m1)))
    if (binary) {
      lrt <- anova(m0, m1, test = "LRT")
      rao <- anova(m0, m1, test = "Rao")
      note(kind, "lrt_chisq", row$lrt_chisq, lrt$Deviance[2], floor = 1)
      note(kind, "lrt_p", row$lrt_p, lrt[["Pr(>Chi)"]][2])
      note(kind, "score_chisq (Rao)", row$score_chisq, rao$Rao[2])
      note(kind, "score_p (Rao)", row$score_p, rao[["Pr(>Chi)"]][2])
    } else {
      note(kind, "lrt_chisq", row$lrt_chisq, lr_stat(m0, m1), floor = 1)
      note(kind, "lrt_p", row$lrt_p, pchisq(lr_stat(m0, m1), 1, lower.tail = FALSE))
      note(kind, "score_chisq", row$score_chisq, score_stat(m0, d$tamis_g, FALSE))
    }
  }
  if (skipped > 0) cat(sprintf("  %d separated rows left out\n", skipped))

  sig <- read.delim(paste0(signals, ".", trait, ".signals.tsv"), header = TRUE, na.strings = "#NA",
                    stringsAsFactors = FALSE, colClasses = c(signal = "character", variant_id = "character"))
  d <- d[, c(trait, covariates)]
  form_cov <- as.formula(paste(trait, "~", paste(covariates, collapse = " + ")))
  cat(sprintf("joint fit, trait %s: %d signals\n", trait, nrow(sig)))
  for (locus in unique(sig$locus)) {
    chosen <- sig[sig$locus == locus, ]
    if (any(!chosen$variant_id %in% variant_id)) next  # a multi-allelic record: not in the dosage table
    terms <- paste0("signal", seq_len(nrow(chosen)))
    for (k in seq_len(nrow(chosen))) d[[terms[k]]] <- imputed(chosen$variant_id[k], rownames(d))
    joint <- fit(update(form_cov, as.formula(paste(". ~ . +", paste(terms, collapse = " + ")))), d, binary)
    coefs <- summary(joint)$coefficients
    for (k in seq_len(nrow(chosen))) {
      row <- chosen[k, ]
      note(kind, "joint_beta", row$joint_beta, coefs[terms[k], 1])
      note(kind, "joint_standard_error", row$joint_standard_error, coefs[terms[k], 2])
      note(kind, "joint_wald_p", row$joint_wald_p,
           if (binary) coefs[terms[k], 4] else 2 * pt(-abs(coefs[terms[k], 3]), df.residual(joint)))
      others <- fit(update(form_cov, as.formula(paste(". ~ . +", paste(c("1", terms[-k]), collapse = " + ")))), d, binary)
      note(kind, "joint_lr_p", row$joint_lr_p, pchisq(lr_stat(others, joint), 1, lower.tail = FALSE))
      note(kind, "conditional_p", row$conditional_p,
           pchisq(score_stat(others, d[[terms[k]]], binary), 1, lower.tail = FALSE))
    }
    d[terms] <- NULL
  }
}

failed <- FALSE
for (key in names(worst)) {
  tolerance <- if (startsWith(key, "linear")) 1e-8 else 1e-6
  ok <- worst[[key]] <= tolerance
  if (!ok) failed <- TRUE
  cat(sprintf("%-36s max relative error %.3g (tolerance %g) %s\n", key, worst[[key]], tolerance, if (ok) "ok" else "FAILED"))
}
if (failed) quit(status = 1)
cat("agreement with R stats: all within tolerance\n")
