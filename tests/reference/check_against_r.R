# Reference check of tamis scan results against R's stats package.
#
# Usage: Rscript check_against_r.R DOSAGES TABLE RESULTS_DIR PREFIX COVARIATES TRAIT...
#   DOSAGES  tab-separated: chrom, pos, ref, alt, then one DS value per sample
#            (from `bcftools query`), header line with the sample IDs
#   TABLE    the trait table given to tamis
#   RESULTS  PREFIX.TRAIT.tsv.gz written by tamis scan
# For every trait it compares, on each confirmed row, beta, SE, the Wald and
# LR statistics and p-values with lm()/glm() fits of the full model, and on
# every checked row the score statistic, written out in R from its formula:
#   U = g'r,  V = g'Wg - g'WX (X'WX)^-1 X'Wg,  T = U^2 / V
# with W = sigma^2 I (sigma^2 = RSS0/(n-p)) for lm and W = diag(mu(1-mu)) for glm.
# Reference: R's stats package (lm, glm, pt, pchisq); version printed below.
# Tolerances (relative): 1e-6 for linear models, 1e-4 for logistic models.

args <- commandArgs(trailingOnly = TRUE)
dosage_path <- args[1]; table_path <- args[2]; prefix <- args[3]
covariates <- strsplit(args[4], ",")[[1]]
traits <- args[-(1:4)]
cat(R.version.string, "\n")

source(file.path(dirname(sub("^--file=", "", grep("^--file=", commandArgs(FALSE), value = TRUE))), "reference_inputs.R"))
dosages <- read_query_dosages(dosage_path)
info <- dosages$info
geno <- dosages$geno
variant_id <- dosages$variant_id
samples <- dosages$samples
tab <- read_trait_table(table_path)

rel_err <- function(ours, ref) {
  scale <- pmax(abs(ref), 1e-300)
  abs(ours - ref) / scale
}
worst <- list()
note <- function(kind, field, value) {
  key <- paste(kind, field)
  worst[[key]] <<- max(c(worst[[key]], value), na.rm = TRUE)
}

for (trait in traits) {
  res <- read.delim(gzfile(paste0(prefix, ".", trait, ".tsv.gz")), header = TRUE,
                    na.strings = "#NA", stringsAsFactors = FALSE, colClasses = c(variant_id = "character"))
  binary <- !is.na(res$n_cases[1])
  kind <- if (binary) "logistic" else "linear"
  d <- tab[intersect(samples, rownames(tab)), c(trait, covariates)]
  d <- d[complete.cases(d), ]
  for (cv in covariates) if (is.character(d[[cv]])) d[[cv]] <- factor(d[[cv]])
  form0 <- as.formula(paste(trait, "~", paste(covariates, collapse = " + ")))
  family <- if (binary) binomial() else gaussian()
  ctrl <- glm.control(epsilon = 1e-14, maxit = 100)
  m0 <- if (binary) glm(form0, data = d, family = family, control = ctrl) else lm(form0, data = d)
  X <- model.matrix(m0)
  X <- X[, !is.na(coef(m0)), drop = FALSE]
  n <- nrow(d); p <- ncol(X)
  mu <- fitted(m0); r <- d[[trait]] - mu
  w <- if (binary) mu * (1 - mu) else rep(sum(r^2) / (n - p), n)

  checked <- res[res$variant_id %in% variant_id, ]
  confirmed <- checked[checked$test != "score", ]
  unconfirmed <- checked[checked$test == "score", ]
  pick <- rbind(confirmed, head(unconfirmed, 25))
  cat(sprintf("trait %s (%s): n = %d, p = %d, checking %d rows (%d confirmed)\n",
              trait, kind, n, p, nrow(pick), nrow(confirmed)))
  if (nrow(confirmed) < 1 || nrow(pick) < 20) stop("too few rows to check for ", trait)
  for (k in seq_len(nrow(pick))) {
    row <- pick[k, ]
    g <- geno[match(row$variant_id, variant_id), rownames(d)]
    g[is.na(g)] <- mean(g, na.rm = TRUE)
    stopifnot(row$n == n)
    # Score test written out from its formula.
    U <- sum(g * r)
    WX <- X * w
    V <- sum(w * g^2) - drop(t(g * w) %*% X %*% solve(crossprod(X, WX), crossprod(WX, g)))
    note(kind, "score_chisq", rel_err(row$score_chisq, U^2 / V))
    note(kind, "score_p", rel_err(row$score_p, pchisq(U^2 / V, 1, lower.tail = FALSE)))
    if (row$test == "score") {
      vprime <- if (binary) V else V / w[1]
      note(kind, "one_step_beta", rel_err(row$beta, U / vprime))
      # For a linear model the one-step SE is sigma/||g~||, so that (beta/SE)^2
      # equals the score statistic; for a logistic model it is 1/sqrt(V).
      se_ref <- if (binary) 1 / sqrt(vprime) else sqrt(w[1] / vprime)
      note(kind, "one_step_se", rel_err(row$standard_error, se_ref))
      next
    }
    d$tamis_g <- g
    m1 <- if (binary) glm(update(form0, . ~ . + tamis_g), data = d, family = family, control = ctrl)
          else lm(update(form0, . ~ . + tamis_g), data = d)
    est <- summary(m1)$coefficients["tamis_g", ]
    if (binary) {
      # summary.glm takes the SE from the weights of the last IRLS step; for a
      # nearly separated variant that step is still moving, so the reference
      # SE is the inverse Fisher information at the fitted values themselves.
      X1 <- model.matrix(m1); mu1 <- fitted(m1)
      est[2] <- sqrt(solve(crossprod(X1, X1 * (mu1 * (1 - mu1))))["tamis_g", "tamis_g"])
    }
    note(kind, "beta", rel_err(row$beta, est[1]))
    note(kind, "standard_error", rel_err(row$standard_error, est[2]))
    note(kind, "wald_chisq", rel_err(row$wald_chisq, (est[1] / est[2])^2))
    wald_p <- if (binary) pchisq((est[1] / est[2])^2, 1, lower.tail = FALSE)
              else 2 * pt(-abs(est[3]), n - p - 1)
    note(kind, "wald_p", rel_err(row$wald_p, wald_p))
    lrt <- if (binary) deviance(m0) - deviance(m1) else n * log(deviance(m0) / deviance(m1))
    note(kind, "lrt_chisq", rel_err(row$lrt_chisq, lrt))
    note(kind, "lrt_p", rel_err(row$lrt_p, pchisq(lrt, 1, lower.tail = FALSE)))
  }
}

failed <- FALSE
for (key in names(worst)) {
  tolerance <- if (startsWith(key, "linear")) 1e-6 else 1e-4
  ok <- worst[[key]] <= tolerance
  if (!ok) failed <- TRUE
  cat(sprintf("%-28s max relative error %.3g (tolerance %g) %s\n", key, worst[[key]], tolerance,
              if (ok) "ok" else "FAILED"))
}
if (failed) quit(status = 1)
cat("agreement with R stats: all within tolerance\n")
