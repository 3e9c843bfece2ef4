# Reference values for tests/test_interaction.cpp: interaction fits of a
# trait on g * E by R 4.2.2 `stats` (lm, glm, pchisq, pf), with sandwich
# variances from `sandwich::vcovHC` (Debian r-cran-sandwich) and Wald and
# LR tests from `lmtest::coeftest`, `lmtest::waldtest` and `lmtest::lrtest`
# (Debian r-cran-lmtest); glm LR tests from anova(..., test = "LRT").
#
# Usage: Rscript interaction_reference.R DATA
#   DATA  tab-separated, header: y yb age siteB siteC E g (written by the test)
# Prints `key<TAB>value` lines. Keys: CASE.FIELD, CASE one of lin_num,
# lin_cat, logit_num, logit_cat (linear or logistic trait; E numeric, or the
# three-level site with indicators B and C against A).
suppressPackageStartupMessages({
  library(sandwich)
  library(lmtest)
})
args <- commandArgs(trailingOnly = TRUE)
d <- read.delim(args[1])
d$site <- factor(ifelse(d$siteB == 1, "B", ifelse(d$siteC == 1, "C", "A")), levels = c("A", "B", "C"))
out <- function(key, value) cat(key, "\t", sprintf("%.17g", value), "\n", sep = "")
cat("# ", R.version.string, "; sandwich ", format(packageVersion("sandwich")), "; lmtest ",
    format(packageVersion("lmtest")), "\n", sep = "")

ctl <- glm.control(epsilon = 1e-15, maxit = 200)
fit <- function(formula, binary) {
  if (binary) glm(formula, data = d, family = binomial(), control = ctl) else lm(formula, data = d)
}

cases <- list(
  lin_num = list(trait = "y", exposure = "E", binary = FALSE),
  lin_cat = list(trait = "y", exposure = "site", binary = FALSE),
  logit_num = list(trait = "yb", exposure = "E", binary = TRUE),
  logit_cat = list(trait = "yb", exposure = "site", binary = TRUE)
)
for (name in names(cases)) {
  case <- cases[[name]]
  others <- if (case$exposure == "E") "age + site + E" else "age + E + site"
  f0 <- as.formula(paste(case$trait, "~", others))
  f_main <- as.formula(paste(case$trait, "~", others, "+ g"))
  f1 <- as.formula(paste(case$trait, "~", others, "+ g *", case$exposure))
  m0 <- fit(f0, case$binary); m_main <- fit(f_main, case$binary); m1 <- fit(f1, case$binary)
  interaction_terms <- grep(":", names(coef(m1)), value = TRUE)  # E:g, or siteB:g and siteC:g
  test_kind <- if (case$binary) "Chisq" else "F"
  variances <- list(model = vcov(m1), hc0 = vcovHC(m1, type = "HC0"), hc3 = vcovHC(m1, type = "HC3"))
  for (v in names(variances)) {
    ct <- coeftest(m1, vcov. = variances[[v]])
    out(paste0(name, ".", v, ".main_beta"), ct["g", 1])
    out(paste0(name, ".", v, ".main_se"), ct["g", 2])
    for (k in seq_along(interaction_terms)) {
      out(paste0(name, ".", v, ".interaction_beta", k), ct[interaction_terms[k], 1])
      out(paste0(name, ".", v, ".interaction_se", k), ct[interaction_terms[k], 2])
    }
    # waldtest's F statistic is the Wald statistic over its df.
    wi <- waldtest(m_main, m1, vcov = variances[[v]], test = test_kind)
    wj <- waldtest(m0, m1, vcov = variances[[v]], test = test_kind)
    q_i <- abs(wi$Df[2]); q_j <- abs(wj$Df[2])
    scale_i <- if (case$binary) 1 else q_i; scale_j <- if (case$binary) 1 else q_j
    out(paste0(name, ".", v, ".interaction_stat"), wi[2, 3] * scale_i)
    out(paste0(name, ".", v, ".interaction_p"), wi[2, 4])
    out(paste0(name, ".", v, ".joint_stat"), wj[2, 3] * scale_j)
    out(paste0(name, ".", v, ".joint_p"), wj[2, 4])
    if (length(interaction_terms) == 1) {
      # The 1-df interaction test as coeftest reports it (t for lm, z for glm).
      out(paste0(name, ".", v, ".interaction_coeftest_p"), ct[interaction_terms[1], 4])
    }
  }
  if (case$binary) {
    ai <- anova(m_main, m1, test = "LRT"); aj <- anova(m0, m1, test = "LRT")
    out(paste0(name, ".lr.interaction_stat"), ai$Deviance[2]); out(paste0(name, ".lr.interaction_p"), ai[2, "Pr(>Chi)"])
    out(paste0(name, ".lr.joint_stat"), aj$Deviance[2]); out(paste0(name, ".lr.joint_p"), aj[2, "Pr(>Chi)"])
  } else {
    # The likelihood ratio 2 (l1 - l0) = n log(RSS0 / RSS1) of the Gaussian
    # fits (lrtest from their logLik); anova.lm's "LRT" scales the RSS drop
    # by the residual variance instead, which is not this statistic.
    li <- lrtest(m_main, m1); lj <- lrtest(m0, m1)
    out(paste0(name, ".lr.interaction_stat"), li$Chisq[2]); out(paste0(name, ".lr.interaction_p"), li[2, "Pr(>Chisq)"])
    out(paste0(name, ".lr.joint_stat"), lj$Chisq[2]); out(paste0(name, ".lr.joint_p"), lj[2, "Pr(>Chisq)"])
  }
}

# Tails: stats::pchisq and stats::pf, log.p = TRUE.
chisq <- data.frame(x = c(0.3, 4.5, 11, 60, 900, 3000), df = c(2, 3, 4, 5, 2, 3))
for (i in seq_len(nrow(chisq))) {
  out(sprintf("chisq.%g.%d", chisq$x[i], chisq$df[i]), pchisq(chisq$x[i], chisq$df[i], lower.tail = FALSE, log.p = TRUE))
}
fs <- data.frame(f = c(0.2, 3.1, 12, 400, 5000), df1 = c(2, 3, 2, 4, 2), df2 = c(50, 394, 1000, 30, 394))
for (i in seq_len(nrow(fs))) {
  out(sprintf("f.%g.%d.%d", fs$f[i], fs$df1[i], fs$df2[i]), pf(fs$f[i], fs$df1[i], fs$df2[i], lower.tail = FALSE, log.p = TRUE))
}

# Score tests of the interaction, written out from their formulas with lm
# and glm fits: U = (g.E)' e at the fit of [X g] (e its residuals), a = the
# columns g.E less their (weighted) regression on [X g], V = s^2 a'a
# (model-based; s^2 of that fit; logistic: a' W a) or sum e_i^2 a_i a_i'
# (HC0; HC3 divides by (1 - h_i)^2 with hatvalues of the [X g] fit). The
# joint test of (g, g.E) the same against the null fit. The logistic scores
# are at glm's maximum-likelihood fit of [X g].
for (name in names(cases)) {
  case <- cases[[name]]
  others <- if (case$exposure == "E") "age + site + E" else "age + E + site"
  m0 <- fit(as.formula(paste(case$trait, "~", others)), case$binary)
  m_main <- fit(as.formula(paste(case$trait, "~", others, "+ g")), case$binary)
  X0 <- model.matrix(m0); X1 <- model.matrix(m_main)
  H <- if (case$exposure == "E") cbind(d$g * d$E) else cbind(d$g * d$siteB, d$g * d$siteC)
  y <- d[[case$trait]]
  score_test <- function(fit, X, cols, type) {
    mu <- fitted(fit); e <- y - mu
    w <- if (case$binary) mu * (1 - mu) else rep(1, length(y))
    a <- cols - X %*% solve(crossprod(X, X * w), crossprod(X * w, cols))
    U <- crossprod(cols, e)
    V <- if (type == "model") {
      s2 <- if (case$binary) 1 else sum(e^2) / df.residual(fit)
      s2 * crossprod(a, a * w)
    } else {
      omega <- e^2
      if (type == "hc3") omega <- omega / (1 - hatvalues(fit))^2
      crossprod(a, a * omega)
    }
    drop(t(U) %*% solve(V, U))
  }
  for (v in c("model", "hc0", "hc3")) {
    k <- ncol(H)
    stat <- score_test(m_main, X1, H, v)
    out(paste0(name, ".score.", v, ".interaction_stat"), stat)
    out(paste0(name, ".score.", v, ".interaction_p"), pchisq(stat, k, lower.tail = FALSE))
    joint <- score_test(m0, X0, cbind(d$g, H), v)
    out(paste0(name, ".score.", v, ".joint_stat"), joint)
    out(paste0(name, ".score.", v, ".joint_p"), pchisq(joint, k + 1, lower.tail = FALSE))
    vc <- if (v == "model") vcov(m_main) else vcovHC(m_main, type = toupper(v))
    out(paste0(name, ".score.", v, ".main_beta"), coef(m_main)["g"])
    out(paste0(name, ".score.", v, ".main_se"), sqrt(vc["g", "g"]))
  }
}
