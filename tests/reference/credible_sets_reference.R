# Reference values for tests/test_credible_sets.cpp, from R 4.2.2 (base and stats).
# Run: Rscript tests/reference/credible_sets_reference.R
# Wakefield's approximate Bayes factor (Genet Epidemiol 2009, 33:79-86) for
# association, evaluated directly as the ratio of the estimate's marginal
# densities, N(beta; 0, V + W) / N(beta; 0, V) (stats::dnorm), and, where it
# does not overflow, as the closed form sqrt(V / (V + W)) exp(z^2 W / (2 (V + W))).
# PIP = BF / sum(BF); the level-c set is the first k variants by decreasing
# PIP (order() keeps ties in input order) with cumsum >= c.
f <- function(x) paste(sprintf("%.17g", x), collapse = ", ")
b <- function(x) paste(as.integer(x), collapse = ", ")
reference <- function(name, beta, se, prior_sd, closed_form) {
  W <- prior_sd^2
  usable <- is.finite(beta) & is.finite(se) & se > 0
  V <- se[usable]^2
  lbf <- dnorm(beta[usable], 0, sqrt(V + W), log = TRUE) - dnorm(beta[usable], 0, sqrt(V), log = TRUE)
  if (closed_form) {
    z <- beta[usable] / se[usable]
    bf <- sqrt(V / (V + W)) * exp(z^2 / 2 * W / (V + W))
    stopifnot(all(abs(log(bf) - lbf) <= 1e-12 * pmax(1, abs(lbf))))
    pip_usable <- bf / sum(bf)
  } else {
    top <- max(lbf)
    pip_usable <- exp(lbf - top - log(sum(exp(lbf - top))))
  }
  log10_bf <- rep(NaN, length(beta)); log10_bf[usable] <- lbf / log(10)
  pip <- rep(0, length(beta)); pip[usable] <- pip_usable
  in_set <- function(level) {
    o <- which(usable)[order(-pip_usable)]
    k <- which(cumsum(pip[o]) >= level)[1]
    if (is.na(k)) k <- length(o)
    member <- rep(FALSE, length(beta)); member[o[seq_len(k)]] <- TRUE
    member
  }
  cat("// ", name, ": prior SD ", prior_sd, "\n", sep = "")
  cat(name, "_beta = {", f(beta), "}\n", sep = "")
  cat(name, "_se = {", f(se), "}\n", sep = "")
  cat(name, "_log10_bf = {", f(log10_bf), "}\n", sep = "")
  cat(name, "_pip = {", f(pip), "}\n", sep = "")
  cat(name, "_in_95 = {", b(in_set(0.95)), "}\n", sep = "")
  cat(name, "_in_99 = {", b(in_set(0.99)), "}\n", sep = "")
}

# A binary trait's log odds ratios around one strong signal; entries 5 and 6
# are identical (a tie), 9 to 12 carry no evidence (SE 0, negative, Inf, NaN).
reference("logistic",
  beta = c(0.31, 0.29, 0.12, -0.05, 0.27, 0.27, 0.02, 0.33, 0.4, 0.1, 0.2, 0.3),
  se = c(0.05, 0.05, 0.06, 0.07, 0.051, 0.051, 0.2, 0.06, 0, -0.1, Inf, NaN),
  prior_sd = 0.2, closed_form = TRUE)
# A quantitative trait (SD 0.8, prior 0.15 SDs) with z up to 60: the BFs reach
# e^1800, so only the log form is evaluated.
reference("strong",
  beta = c(0.9, 0.899, 0.6, -0.3, 0.05, 0.75, 0.7, 0.2, -0.6, 0.897),
  se = c(0.015, 0.015, 0.02, 0.03, 0.04, 0.0125, 0.02, 0.1, 0.01, 0.015),
  prior_sd = 0.12, closed_form = FALSE)
# Weak evidence everywhere: wide sets, the 99% set larger than the 95% set.
reference("weak",
  beta = c(0.05, -0.08, 0.11, 0.02, 0.09, -0.12, 0.07, 0.0, 0.04, -0.06),
  se = c(0.05, 0.05, 0.05, 0.06, 0.05, 0.055, 0.05, 0.05, 0.07, 0.05),
  prior_sd = 0.2, closed_form = TRUE)
