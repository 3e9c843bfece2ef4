# Reference check of tamis interaction scans (scan --interaction-with).
#
# Usage: Rscript check_interaction_against_r.R DOSAGES TABLE PREFIX COVARIATES EXPOSURE HC
#   DOSAGES     from bcftools query (chrom, pos, ref, alt, one DS per sample)
#   PREFIX      the scan's output prefix (PREFIX.TRAIT.tsv.gz for fev1_litres, winter_wheeze)
#   COVARIATES  the null model's covariates, the exposure among them
#   HC          HC0 or HC3, the scan's --robust-errors
# Refitted rows: beta, standard_error, wald_chisq and p_value (the robust
# Wald test of the interaction), lrt_chisq and lrt_p, main_beta and
# main_standard_error, joint_p, joint_model_p, joint_lrt_p and
# interaction_model_p against
#   R 4.2.2 `stats`: lm / glm(binomial) of trait ~ covariates + g * E;
#   sandwich::vcovHC(type = HC) (Debian r-cran-sandwich);
#   lmtest::coeftest, lmtest::waldtest (F for lm, Chisq for glm), lmtest::lrtest
#   (lm) (Debian r-cran-lmtest); anova(..., test = "LRT") (glm).
# Linear score rows: the robust score statistic from its formula with the lm
# fit of [X g] (e its residuals, a = g.E less its regression on [X g]):
#   U = (g.E)' e, V = sum e_i^2 a_i a_i' (HC3: over (1 - h_i)^2);
# the joint score of (g, g.E) the same at the null fit (and model-based:
# V = s0^2 b'b, b the columns less their regression on X).
# Tolerances (relative): 1e-8 linear, 1e-6 logistic (the file's nine
# significant digits allow 5e-9).
suppressPackageStartupMessages({ library(sandwich); library(lmtest) })
args <- commandArgs(trailingOnly = TRUE)
dosage_path <- args[1]; table_path <- args[2]; prefix <- args[3]
covariates <- strsplit(args[4], ",")[[1]]; exposure <- args[5]; hc <- args[6]
cat(R.version.string, "; sandwich", format(packageVersion("sandwich")), "; lmtest",
    format(packageVersion("lmtest")), "\n")

source(file.path(dirname(sub("^--file=", "", grep("^--file=", commandArgs(FALSE), value = TRUE))), "reference_inputs.R"))
dosages <- read_query_dosages(dosage_path)
info <- dosages$info
geno <- dosages$geno
variant_id <- dosages$variant_id
samples <- dosages$samples
tab <- read_trait_table(table_path)

worst <- list()
separated <- 0; current <- ""
note <- function(kind, field, ours, ref) {
  if (nzchar(Sys.getenv("TAMIS_DEBUG")) && abs(ours - ref) / pmax(abs(ref), 1e-300) > 1e-6) cat("DEBUG", kind, field, ours, ref, current, "\n")
  err <- abs(ours - ref) / pmax(abs(ref), 1e-300)
  key <- paste(kind, field)
  worst[[key]] <<- max(c(worst[[key]], err), na.rm = FALSE)
}

for (trait in c("fev1_litres", "winter_wheeze")) {
  res <- read.delim(gzfile(paste0(prefix, ".", trait, ".tsv.gz")), header = TRUE, na.strings = "#NA",
                    stringsAsFactors = FALSE, colClasses = c(variant_id = "character"))
  binary <- !is.na(res$n_cases[1])
  kind <- if (binary) "logistic" else "linear"
  d <- tab[intersect(samples, rownames(tab)), c(trait, covariates)]
  d <- d[complete.cases(d), ]
  for (cv in covariates) {
    if (is.character(d[[cv]])) {
      # tamis's reference level is the most frequent one (ties: the first in sort order).
      counts <- table(d[[cv]])
      d[[cv]] <- relevel(factor(d[[cv]]), ref = names(counts)[which.max(counts)])
    }
  }
  others <- paste(covariates, collapse = " + ")
  f0 <- as.formula(paste(trait, "~", others))
  f_main <- as.formula(paste(trait, "~", others, "+ tamis_g"))
  f1 <- as.formula(paste(trait, "~", others, "+ tamis_g *", exposure))
  ctl <- glm.control(epsilon = 1e-15, maxit = 200)
  # glm stops on the deviance's relative change; for a rare variant the
  # coefficients still move in their seventh digit then, so each fit is
  # run a second time from its own estimate.
  fit <- function(f) {
    if (!binary) return(lm(f, data = d))
    first <- glm(f, data = d, family = binomial(), control = ctl)
    glm(f, data = d, family = binomial(), control = ctl, start = coef(first))
  }
  m0 <- fit(f0)
  test_kind <- if (binary) "Chisq" else "F"
  refitted <- res[startsWith(res$test, "interaction_wald") & res$variant_id %in% variant_id, ]
  scored <- head(res[res$test == "interaction_score" & res$variant_id %in% variant_id, ], 25)
  cat(sprintf("%s (%s), exposure %s, %s: n = %d, %d refitted rows, %d score rows\n", trait, kind, exposure, hc,
              nrow(d), nrow(refitted), nrow(scored)))
  if (nrow(refitted) < 5) stop("too few refitted rows for ", trait)
  for (k in seq_len(nrow(refitted))) {
    row <- refitted[k, ]; current <<- paste(row$variant_id, row$mac)
    g <- geno[match(row$variant_id, variant_id), rownames(d)]
    g[is.na(g)] <- mean(g, na.rm = TRUE)
    d$tamis_g <- g
    stopifnot(row$n == nrow(d))
    m_main <- fit(f_main); m1 <- suppressWarnings(fit(f1))
    if (binary && (!m1$converged || any(pmin(fitted(m1), 1 - fitted(m1)) < 1e-8))) {
      # Separation (a rare variant among few cases): no finite estimates to compare.
      separated <<- separated + 1
      next
    }
    terms <- grep(":", names(coef(m1)), value = TRUE)
    stopifnot(length(terms) == row$interaction_df)
    robust <- vcovHC(m1, type = hc)
    ct <- coeftest(m1, vcov. = robust)
    note(kind, "beta", row$beta, ct[terms[1], 1])
    note(kind, "standard_error", row$standard_error, ct[terms[1], 2])
    wi <- waldtest(m_main, m1, vcov = robust, test = test_kind)
    wj <- waldtest(m0, m1, vcov = robust, test = test_kind)
    scale <- if (binary) 1 else length(terms)
    note(kind, "wald_chisq", row$wald_chisq, wi[2, 3] * scale)
    note(kind, "p_value", row$p_value, wi[2, 4])
    note(kind, "main_beta", row$main_beta, ct["tamis_g", 1])
    note(kind, "main_standard_error", row$main_standard_error, ct["tamis_g", 2])
    note(kind, "joint_p", row$joint_p, wj[2, 4])
    note(kind, "interaction_model_p", row$interaction_model_p, waldtest(m_main, m1, test = test_kind)[2, 4])
    note(kind, "joint_model_p", row$joint_model_p, waldtest(m0, m1, test = test_kind)[2, 4])
    if (binary) {
      lr <- anova(m_main, m1, test = "LRT"); lr_stat <- lr$Deviance[2]; lr_p <- lr[2, "Pr(>Chi)"]
    } else {
      lr <- lrtest(m_main, m1); lr_stat <- lr$Chisq[2]; lr_p <- lr[2, "Pr(>Chisq)"]
    }
    note(kind, "lrt_chisq", row$lrt_chisq, lr_stat)
    note(kind, "lrt_p", row$lrt_p, lr_p)
    joint_lr <- if (binary) anova(m0, m1, test = "LRT")[2, "Pr(>Chi)"] else lrtest(m0, m1)[2, "Pr(>Chisq)"]
    note(kind, "joint_lrt_p", row$joint_lrt_p, joint_lr)
  }
  if (binary) next  # the logistic score is approximate (see test_interaction.cpp)
  for (k in seq_len(nrow(scored))) {
    row <- scored[k, ]
    g <- geno[match(row$variant_id, variant_id), rownames(d)]
    g[is.na(g)] <- mean(g, na.rm = TRUE)
    d$tamis_g <- g
    m_main <- fit(f_main)
    X <- model.matrix(m_main)
    H <- model.matrix(as.formula(paste("~ 0 + tamis_g:", exposure)), data = d)
    H <- H[, colSums(abs(H)) > 0 & !grepl(paste0(levels(d[[exposure]])[1], "$"), colnames(H)), drop = FALSE]
    if (!is.factor(d[[exposure]])) H <- cbind(d$tamis_g * d[[exposure]])
    e <- resid(m_main)
    a <- H - X %*% solve(crossprod(X), crossprod(X, H))
    omega <- e^2
    if (hc == "HC3") omega <- omega / (1 - hatvalues(m_main))^2
    U <- crossprod(H, e)
    stat <- drop(t(U) %*% solve(crossprod(a, a * omega), U))
    note("linear score", "score_chisq", row$score_chisq, stat)
    note("linear score", "score_p", row$score_p, pchisq(stat, ncol(H), lower.tail = FALSE))
    note("linear score", "main_beta", row$main_beta, coef(m_main)["tamis_g"])
    B <- cbind(d$tamis_g, H)
    X0 <- model.matrix(m0); r0 <- resid(m0)
    b <- B - X0 %*% solve(crossprod(X0), crossprod(X0, B))
    U0 <- crossprod(B, r0)
    omega0 <- r0^2
    if (hc == "HC3") omega0 <- omega0 / (1 - hatvalues(m0))^2
    joint <- drop(t(U0) %*% solve(crossprod(b, b * omega0), U0))
    joint_model <- drop(t(U0) %*% solve(sum(r0^2) / df.residual(m0) * crossprod(b), U0))
    note("linear score", "joint_p", row$joint_p, pchisq(joint, ncol(B), lower.tail = FALSE))
    note("linear score", "joint_model_p", row$joint_model_p, pchisq(joint_model, ncol(B), lower.tail = FALSE))
  }
}

if (separated > 0) cat(separated, "refitted logistic rows skipped: glm finds separation\n")
failed <- FALSE
for (key in names(worst)) {
  tolerance <- if (startsWith(key, "linear")) 1e-8 else 1e-6
  ok <- worst[[key]] <= tolerance
  if (!ok) failed <- TRUE
  cat(sprintf("%-36s max relative error %.3g (tolerance %g) %s\n", key, worst[[key]], tolerance,
              if (ok) "ok" else "FAILED"))
}
if (failed) quit(status = 1)
cat("agreement with R (stats, sandwich, lmtest): all within tolerance\n")
