# Reference check of `tamis scan --relatedness` with a random family
# intercept against R's lme4 (Debian r-cran-lme4; versions printed below).
#
# Usage: Rscript check_mixed_against_lme4.R DOSAGES TABLE FAMILIES PREFIX COVARIATES TRAIT
# - Variance components: lmer(y ~ covariates + (1 | family), REML = TRUE);
#   tamis logs h^2, sigma_g^2 and sigma_e^2 (PREFIX.log).
# - Score test of every checked row, written out from its formula with
#   lme4's REML variance components: T = (g'Py)^2 / (g'Pg),
#   P = V^-1 - V^-1 X (X'V^-1 X)^-1 X'V^-1, V = s2_e I + s2_g A.
# - Confirmed rows: lmer(y ~ covariates + g + (1 | family), REML = FALSE);
#   beta, SE and the Wald statistic (t value)^2 from summary(), and the LR
#   statistic from anova(m0, m1) of the two ML fits.
# Tolerance: 1e-4 relative (the issue's bound for lme4, whose optimiser
# stops at its own tolerance).
suppressPackageStartupMessages(library(lme4))
args <- commandArgs(trailingOnly = TRUE)
dosage_path <- args[1]; table_path <- args[2]; families_path <- args[3]; prefix <- args[4]
covariates <- strsplit(args[5], ",")[[1]]; trait <- args[6]
cat(R.version.string, "; lme4", as.character(packageVersion("lme4")), "\n")

source(file.path(dirname(sub("^--file=", "", grep("^--file=", commandArgs(FALSE), value = TRUE))), "reference_inputs.R"))
dosages <- read_query_dosages(dosage_path)
info <- dosages$info
geno <- dosages$geno
variant_id <- dosages$variant_id
samples <- dosages$samples
tab <- read_trait_table(table_path)
fam <- read.delim(families_path, header = TRUE, stringsAsFactors = FALSE)
fam <- fam[fam$role != "ancestor", ]
family_of <- setNames(ifelse(fam$role == "unrelated", fam$participant, fam$family), fam$participant)

d <- tab[intersect(samples, rownames(tab)), c(trait, covariates)]
d <- d[complete.cases(d), ]
for (cv in covariates) if (is.character(d[[cv]])) d[[cv]] <- factor(d[[cv]])
d$family <- factor(family_of[rownames(d)])
ctrl <- lmerControl(optimizer = "bobyqa", optCtrl = list(rhobeg = 1e-3, rhoend = 1e-12, maxfun = 1e5),
                    calc.derivs = FALSE)
form0 <- as.formula(paste(trait, "~", paste(covariates, collapse = " + "), "+ (1 | family)"))
reml <- lmer(form0, data = d, REML = TRUE, control = ctrl)
vc <- as.data.frame(VarCorr(reml))
s2_g <- vc$vcov[vc$grp == "family"]; s2_e <- vc$vcov[vc$grp == "Residual"]
n <- nrow(d)

rel_err <- function(ours, ref) abs(ours - ref) / pmax(abs(ref), 1e-300)
worst <- list()
note <- function(field, value) worst[[field]] <<- max(c(worst[[field]], value), na.rm = TRUE)

# Variance components from the log line "h^2 = ..., sigma_g^2 = ..., sigma_e^2 = ...".
log_text <- readLines(paste0(prefix, ".log"))
line <- grep(paste0("null model ", trait, ": linear mixed model"), log_text, value = TRUE)
if (length(line) != 1) stop("no mixed null model line in the log")
logged <- function(name) as.numeric(sub(paste0(".*", name, " = ([-0-9.eE+]+).*"), "\\1", line))
note("sigma2_g", rel_err(logged("sigma_g\\^2"), s2_g))
note("sigma2_e", rel_err(logged("sigma_e\\^2"), s2_e))
note("h2", rel_err(logged("h\\^2"), s2_g / (s2_g + s2_e)))
note("reml_log_likelihood", rel_err(logged("REML log-likelihood"), as.numeric(logLik(reml))))
cat(sprintf("lme4 REML: sigma_g^2 %.6g, sigma_e^2 %.6g; tamis: %.6g, %.6g\n", s2_g, s2_e,
            logged("sigma_g\\^2"), logged("sigma_e\\^2")))

# V and P at lme4's REML components.
Z <- model.matrix(~ family - 1, d)
V <- s2_e * diag(n) + s2_g * tcrossprod(Z)
X <- getME(reml, "X")
Vi <- solve(V)
ViX <- Vi %*% X
P <- Vi - ViX %*% solve(crossprod(X, ViX), t(ViX))
y <- d[[trait]]
Py <- P %*% y

res <- read.delim(gzfile(paste0(prefix, ".", trait, ".tsv.gz")), header = TRUE, na.strings = "#NA",
                  stringsAsFactors = FALSE, colClasses = c(variant_id = "character"))
checked <- res[res$variant_id %in% variant_id, ]
confirmed <- checked[checked$test != "score", ]
pick <- rbind(confirmed, head(checked[checked$test == "score", ], 30))
cat(sprintf("trait %s: n = %d, checking %d rows (%d confirmed)\n", trait, n, nrow(pick), nrow(confirmed)))
if (nrow(confirmed) < 3 || nrow(pick) < 20) stop("too few rows to check")
ml0 <- lmer(form0, data = d, REML = FALSE, control = ctrl)
for (k in seq_len(nrow(pick))) {
  row <- pick[k, ]
  g <- geno[match(row$variant_id, variant_id), rownames(d)]
  g[is.na(g)] <- mean(g, na.rm = TRUE)
  stopifnot(row$n == n)
  T <- drop(crossprod(g, Py))^2 / drop(crossprod(g, P %*% g))
  note("score_chisq", rel_err(row$score_chisq, T))
  if (row$test == "score") next
  d$tamis_g <- g
  ml1 <- lmer(update(form0, . ~ . + tamis_g), data = d, REML = FALSE, control = ctrl)
  est <- summary(ml1)$coefficients["tamis_g", ]
  note("beta", rel_err(row$beta, est[["Estimate"]]))
  note("standard_error", rel_err(row$standard_error, est[["Std. Error"]]))
  note("wald_chisq", rel_err(row$wald_chisq, est[["t value"]]^2))
  lrt <- suppressMessages(anova(ml0, ml1))$Chisq[2]
  note("lrt_chisq", rel_err(row$lrt_chisq, lrt))
}

failed <- FALSE
for (key in names(worst)) {
  ok <- worst[[key]] <= 1e-4
  if (!ok) failed <- TRUE
  cat(sprintf("%-22s max relative error %.3g (tolerance 1e-4) %s\n", key, worst[[key]], if (ok) "ok" else "FAILED"))
}
if (failed) quit(status = 1)
cat("agreement with lme4: all within tolerance\n")
