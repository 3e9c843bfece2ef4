# The random family intercept model fitted by R lme4 (Debian r-cran-lme4),
# for tests/test_mixed_model.cpp. A relatedness matrix with 1 for every pair
# within a family is exactly lmer's (1 | family) term.
#
# Usage: Rscript mixed_model_lme4.R DATA.tsv
# DATA.tsv: columns family, y, c1, c2, then variants g1, g2, ... (header line).
# Prints "key<TAB>value" lines:
#   lme4_version, r_version
#   reml_sigma2_g, reml_sigma2_e, reml_loglik      REML fit of y ~ c1 + c2 + (1 | family)
#   reml_beta_K, reml_se_K (K = 0, 1, 2)           fixed effects and SEs (vcov) of that fit
#   ml0_loglik, ml0_sigma2_g, ml0_sigma2_e          ML fit of the same model
#   For each variant gJ: gJ_lr (anova(m0, m1) Chisq), gJ_t (summary t value of gJ),
#   gJ_beta, gJ_se, gJ_ml1_loglik, of m1 = y ~ c1 + c2 + gJ + (1 | family) by ML.
suppressPackageStartupMessages(library(lme4))
args <- commandArgs(trailingOnly = TRUE)
data <- read.delim(args[1])
data$family <- factor(data$family)

out <- function(key, value) cat(key, "\t", sprintf("%.15g", value), "\n", sep = "")
cat("lme4_version\t", as.character(packageVersion("lme4")), "\n", sep = "")
cat("r_version\t", R.version$major, ".", R.version$minor, "\n", sep = "")

# Tight convergence, so that the optimiser's stopping rule does not limit the
# comparison at 1e-4: bobyqa to a final trust radius of 1e-12 on theta.
control <- lmerControl(optimizer = "bobyqa", optCtrl = list(rhoend = 1e-12, maxfun = 1e5),
                       check.conv.grad = "ignore")
variance_components <- function(model) {
  vc <- as.data.frame(VarCorr(model))
  c(vc$vcov[vc$grp == "family"], vc$vcov[vc$grp == "Residual"])
}

m_reml <- lmer(y ~ c1 + c2 + (1 | family), data = data, REML = TRUE, control = control)
vc <- variance_components(m_reml)
out("reml_sigma2_g", vc[1])
out("reml_sigma2_e", vc[2])
out("reml_loglik", as.numeric(logLik(m_reml)))
out("reml_criterion", REMLcrit(m_reml))
beta <- fixef(m_reml)
se <- sqrt(diag(as.matrix(vcov(m_reml))))
for (k in seq_along(beta)) {
  out(paste0("reml_beta_", k - 1), beta[k])
  out(paste0("reml_se_", k - 1), se[k])
}

m0 <- lmer(y ~ c1 + c2 + (1 | family), data = data, REML = FALSE, control = control)
vc0 <- variance_components(m0)
out("ml0_loglik", as.numeric(logLik(m0)))
out("ml0_sigma2_g", vc0[1])
out("ml0_sigma2_e", vc0[2])

for (variant in grep("^g[0-9]+$", names(data), value = TRUE)) {
  m1 <- lmer(as.formula(paste("y ~ c1 + c2 +", variant, "+ (1 | family)")), data = data, REML = FALSE,
             control = control)
  table <- anova(m0, m1)
  coefs <- summary(m1)$coefficients
  out(paste0(variant, "_lr"), table$Chisq[2])
  out(paste0(variant, "_t"), coefs[variant, "t value"])
  out(paste0(variant, "_beta"), coefs[variant, "Estimate"])
  out(paste0(variant, "_se"), coefs[variant, "Std. Error"])
  out(paste0(variant, "_ml1_loglik"), as.numeric(logLik(m1)))
}
