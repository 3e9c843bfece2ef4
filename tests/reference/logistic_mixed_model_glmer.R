# Laplace fits of the logistic model with a random family intercept by R lme4
# (Debian r-cran-lme4), for tests/test_logistic_mixed_model.cpp. glmer with
# nAGQ = 1 maximises the Laplace approximation of the marginal likelihood
# over beta and the family variance, with the random effects at their
# conditional mode: the objective the model under test maximises. A
# relatedness matrix with 1 for every pair within a family is exactly the
# (1 | family) term.
#
# Usage: Rscript logistic_mixed_model_glmer.R DATA.tsv
# DATA.tsv: columns family, y (0/1), c1, c2, then variants g1, g2, ...
# Prints "key<TAB>value" lines:
#   r_version, lme4_version
#   null_loglik, null_tau, null_beta_K (K = 0, 1, 2)   y ~ c1 + c2 + (1 | family)
#   per variant gJ, of y ~ c1 + c2 + gJ + (1 | family):
#     gJ_loglik, gJ_tau, gJ_beta_K (K = 0..3, the variant last),
#     gJ_lr      anova(m0, m1) Chisq
#     gJ_z       summary()'s z value (SE from the finite-difference Hessian
#                of the Laplace deviance over theta and beta, lme4's default)
#     gJ_z_rx    beta / SE with vcov(use.hessian = FALSE): the SE of the
#                penalised working model at the fit, (X' Sigma^-1 X)^-1
suppressPackageStartupMessages(library(lme4))
args <- commandArgs(trailingOnly = TRUE)
data <- read.delim(args[1])
data$family <- factor(data$family)

out <- function(key, value) cat(key, "\t", sprintf("%.15g", value), "\n", sep = "")
cat("r_version\t", R.version$major, ".", R.version$minor, "\n", sep = "")
cat("lme4_version\t", as.character(packageVersion("lme4")), "\n", sep = "")

# Tight convergence, so that the optimiser's stopping rule does not limit a
# comparison at 1e-3: bobyqa (both stages) to a final trust radius of 1e-12.
# The convergence checks only warn, and a family variance near 0 is a
# legitimate fit here.
control <- glmerControl(optimizer = "bobyqa", optCtrl = list(rhoend = 1e-12, maxfun = 1e5),
                        check.conv.grad = "ignore", check.conv.singular = "ignore",
                        check.conv.hess = "ignore")
fit <- function(terms) {
  glmer(as.formula(paste("y ~", terms, "+ (1 | family)")), data = data, family = binomial, nAGQ = 1,
        control = control)
}
report <- function(prefix, model) {
  out(paste0(prefix, "_loglik"), as.numeric(logLik(model)))
  out(paste0(prefix, "_tau"), as.data.frame(VarCorr(model))$vcov[1])
  beta <- fixef(model)
  for (k in seq_along(beta)) out(paste0(prefix, "_beta_", k - 1), beta[k])
}

m0 <- fit("c1 + c2")
report("null", m0)
for (variant in grep("^g[0-9]+$", names(data), value = TRUE)) {
  m1 <- fit(paste("c1 + c2 +", variant))
  report(variant, m1)
  out(paste0(variant, "_lr"), anova(m0, m1)$Chisq[2])
  out(paste0(variant, "_z"), summary(m1)$coefficients[variant, "z value"])
  # lme4 warns that the two covariances differ; that difference is why both are printed.
  se_rx <- sqrt(diag(as.matrix(suppressWarnings(vcov(m1, use.hessian = FALSE)))))[4]
  out(paste0(variant, "_z_rx"), fixef(m1)[4] / se_rx)
}
