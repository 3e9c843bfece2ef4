# Penalised quasi-likelihood (PQL) fits of the logistic model with a random
# family intercept, for tests/test_logistic_mixed_model.cpp. A relatedness
# matrix with 1 for every pair within a family is exactly random = ~1 | family.
#
# Usage: Rscript logistic_mixed_model_pql.R DATA.tsv
# DATA.tsv: columns family, y (0/1), c1, c2, then variants (header line).
# Prints "key<TAB>value" lines (K = 0, 1, 2: intercept, c1, c2):
#   r_version, mass_version, nlme_version
#   glmmpql_tau, glmmpql_beta_K, glmmpql_iterations
#       R MASS::glmmPQL(y ~ c1 + c2, random = ~1 | family, family = binomial,
#       niter = 200, control = nlme::lmeControl(sigma = 1)), as released:
#       its variance is estimated by ML on each working model
#   nlme_ml_tau, nlme_ml_beta_K, nlme_ml_iterations
#       glmmPQL's iteration written out on nlme::lme (ML), to a tight tolerance
#   formula_ml_tau, formula_ml_beta_K, formula_reml_tau, formula_reml_beta_K,
#   formula_reml_iterations, formula_reml_last_change
#       the same iteration with each working model solved from its formulas
#       (below), tau by ML or by REML
#
# Dispersion: lmeControl(sigma = 1) fixes the residual scale at 1, so that
# the working model's residual variance is exactly 1 / w, as Bernoulli data
# have (Var(y) = mu (1 - mu)): the model under test. glmmPQL's default
# instead also estimates a residual scale (an overdispersion factor).
#
# Why REML is not taken from nlme: glmmPQL fixes its lme calls to
# method = "ML" (mcall$method <- "ML" in its source), and nlme 3.1.162's
# REML with a fixed sigma does not maximise the REML likelihood. Measured on
# a plain random-intercept data set (240 samples, sigma fixed at 1): lme's
# REML estimate 0.7978, the REML criterion's maximum (dense formula) 0.8064,
# and lme's own reported REML logLik peaks at 0.8317; its ML estimate agrees
# with the dense ML maximum to 1e-7. So REML-PQL, the fit under test, is
# written out from formulas and checked through its ML twin against nlme and
# glmmPQL.
suppressPackageStartupMessages({
  library(MASS)
  library(nlme)
})
args <- commandArgs(trailingOnly = TRUE)
data <- read.delim(args[1])
data$family <- factor(data$family)
y <- data$y
X <- cbind(1, data$c1, data$c2)

out <- function(key, value) cat(key, "\t", sprintf("%.17g", value), "\n", sep = "")
cat("r_version\t", R.version$major, ".", R.version$minor, "\n", sep = "")
cat("mass_version\t", as.character(packageVersion("MASS")), "\n", sep = "")
cat("nlme_version\t", as.character(packageVersion("nlme")), "\n", sep = "")

report <- function(prefix, tau, beta, iterations) {
  out(paste0(prefix, "_tau"), tau)
  for (k in seq_along(beta)) out(paste0(prefix, "_beta_", k - 1), beta[k])
  out(paste0(prefix, "_iterations"), iterations)
}
# getVarCov, not VarCorr: VarCorr formats its values as text to 7 digits.
report_lme <- function(prefix, fit, iterations) report(prefix, getVarCov(fit)[1, 1], fixef(fit), iterations)

# glmmPQL stops when sum((eta - eta_old)^2) < 1e-6 sum(eta^2); niter = 200
# lets that test, not the iteration count, end the loop. Its iterations are
# counted from the messages of verbose = TRUE.
iterations <- 0
fit <- withCallingHandlers(
  glmmPQL(y ~ c1 + c2, random = ~ 1 | family, family = binomial, data = data, niter = 200,
          control = lmeControl(sigma = 1)),
  message = function(m) {
    iterations <<- iterations + 1
    invokeRestart("muffleMessage")
  })
report_lme("glmmpql", fit, iterations)

# PQL: from the glm fit (as glmmPQL starts), the working response
# yw = eta + (y - mu) / w and weights w = mu (1 - mu) (glmmPQL's
# eta + (y - mu) / mu.eta and mu.eta^2 / variance for the logit link), the
# working model solved for eta = X beta + b, until no eta moves by `tolerance`.
pql <- function(prefix, solve_working_model, tolerance) {
  eta <- glm(y ~ c1 + c2, family = binomial, data = data)$linear.predictors
  for (iteration in 1:500) {
    mu <- plogis(eta)
    w <- mu * (1 - mu)
    fit <- solve_working_model(eta + (y - mu) / w, w)
    change <- max(abs(fit$eta - eta))
    eta <- fit$eta
    if (change < tolerance) break
  }
  report(prefix, fit$tau, fit$beta, iteration)
  out(paste0(prefix, "_last_change"), change)
}

# glmmPQL's own working model: lme with varFixed weights 1 / w and sigma
# fixed at 1, by ML, optimised to tight tolerances. (nlme's optimiser places
# tau to about 1e-8 relative whatever its tolerances, so near the end eta
# moves by 1e-10 to 1e-8 from one iteration to the next at random, measured:
# 1e-8 is as far as this loop can be taken.)
tight_control <- lmeControl(sigma = 1, maxIter = 500, msMaxIter = 500, niterEM = 0, tolerance = 1e-12,
                            msTol = 1e-14, msMaxEval = 2000, returnObject = TRUE)
nlme_ml <- function(yw, w) {
  data$zz <- yw
  data$invwt <- 1 / w
  fit <- lme(zz ~ c1 + c2, random = ~ 1 | family, data = data, weights = varFixed(~ invwt), method = "ML",
             control = tight_control)
  list(eta = as.vector(fitted(fit)), tau = getVarCov(fit)[1, 1], beta = fixef(fit))
}
pql("nlme_ml", nlme_ml, 1e-8)

# The working model from its formulas. Sigma = W^-1 + tau A is block
# diagonal by family, each block W_f^-1 + tau 1 1', so with
# s_f = sum of w over family f and d_f = 1 + tau s_f (Sherman-Morrison):
#   u' Sigma^-1 v = sum_i w_i u_i v_i - tau sum_f (sum_f w u)(sum_f w v) / d_f
#   log|Sigma| = -sum log w + sum_f log d_f
#   sum over family f of Sigma^-1 r = (sum_f w r) / d_f, so b_f = tau (sum_f w r) / d_f
# and the derivatives in tau, with P = Sigma^-1 - Sigma^-1 X (X'Sigma^-1 X)^-1 X'Sigma^-1:
#   ML score   = (r'Sigma^-1 A Sigma^-1 r - tr(Sigma^-1 A)) / 2
#              = (sum_f ((sum_f w r) / d_f)^2 - sum_f s_f / d_f) / 2
#   REML score = (r'Sigma^-1 A Sigma^-1 r - tr(P A)) / 2
#              = ML score + tr((X'Sigma^-1 X)^-1 sum_f x_f x_f') / 2, x_f = (sum_f w X) / d_f
# (r the GLS residual at tau). tau is the root of the score, or 0 when the
# score is negative at 0.
gls_at <- function(tau, yw, w) {
  s <- rowsum(w, data$family)[, 1]
  d <- 1 + tau * s
  RX <- rowsum(w * X, data$family)
  XtSiX <- crossprod(X, w * X) - tau * crossprod(RX, RX / d)
  XtSiy <- crossprod(X, w * yw) - tau * crossprod(RX, rowsum(w * yw, data$family)[, 1] / d)
  beta <- drop(solve(XtSiX, XtSiy))
  r <- drop(yw - X %*% beta)
  alpha_sums <- rowsum(w * r, data$family)[, 1] / d
  list(beta = beta, b = (tau * alpha_sums)[as.integer(data$family)], s = s, d = d, RX = RX, XtSiX = XtSiX,
       alpha_sums = alpha_sums)
}
variance_score <- function(tau, yw, w, reml) {
  at <- gls_at(tau, yw, w)
  score <- sum(at$alpha_sums^2) - sum(at$s / at$d)
  if (reml) score <- score + sum(diag(solve(at$XtSiX, crossprod(at$RX / at$d))))
  score / 2
}
formula_model <- function(reml) {
  function(yw, w) {
    score <- function(tau) variance_score(tau, yw, w, reml)
    tau <- if (score(0) <= 0) 0 else {
      upper <- 1
      while (score(upper) > 0) upper <- 2 * upper
      uniroot(score, c(0, upper), tol = 1e-15, maxiter = 200)$root
    }
    at <- gls_at(tau, yw, w)
    list(eta = drop(X %*% at$beta) + at$b, tau = tau, beta = at$beta)
  }
}
pql("formula_ml", formula_model(reml = FALSE), 1e-12)
pql("formula_reml", formula_model(reml = TRUE), 1e-12)
