# Reference values for tests/test_model.cpp, from R 4.2.2 (stats).
# Run: Rscript tests/reference/model_reference.R
# The dataset is built from integer formulas so that C++ reproduces it bit for bit.
options(digits = 15)
f <- function(x) paste(sprintf("%.16e", x), collapse = ", ")
cat("// chi2_1 upper tail: stats::pchisq(x, 1, lower.tail=FALSE, log.p=TRUE)\n")
xs <- c(0.5, 10, 100, 700, 1500, 3000, 5000, 20000)
cat("chisq_x = {", f(xs), "}\n")
cat("chisq_logp = {", f(pchisq(xs, 1, lower.tail = FALSE, log.p = TRUE)), "}\n")
cat("// Student t two-sided: log(2) + stats::pt(-abs(t), df, log.p=TRUE)\n")
ts <- c(0.1, 1.3, 2.5, 4, 10, 60, 3, 8, 0.7)
dfs <- c(5, 12, 37, 1, 30, 50, 1000, 250000, 3)
cat("t_t = {", f(ts), "}\n")
cat("t_df = {", f(dfs), "}\n")
cat("t_logp = {", f(log(2) + pt(-abs(ts), dfs, log.p = TRUE)), "}\n")

s <- 0:39
age <- 20 + (s * 37) %% 41
level <- (s * 7 + s %/% 5) %% 3
B <- as.numeric(level == 1)
C <- as.numeric(level == 2)
k1 <- (s * 13 + 5) %% 9
g1 <- k1 / 4
g2 <- ifelse(s %% 11 == 3, 1, ifelse(s == 17, 2, 0))
enoise <- (s * s * 17 + s * 29 + 11) %% 101 - 50
y <- (600 + 12 * age + 160 * B - 120 * C + 35 * k1 + 16 * enoise) / 400
yb <- as.numeric(((s * s * 7 + s * 3 + 1) %% 13 + k1 + 2 * B) > 9)
cat("// level counts:", table(level), " cases:", sum(yb), "\n")

X <- cbind(1, age, B, C)
score <- function(g, r, w, sigma2) {
  U <- sum(g * r)
  XtW <- t(X * w)
  V <- sigma2 * (sum(w * g * g) - drop(t(g) %*% t(XtW) %*% solve(XtW %*% X, XtW %*% g)))
  c(U, V, U^2 / V, pchisq(U^2 / V, 1, lower.tail = FALSE, log.p = TRUE))
}

cat("// lm: stats::lm, summary.lm, logLik.lm\n")
m0 <- lm(y ~ age + B + C)
cat("lm0_coef = {", f(coef(m0)), "}\n")
cat("lm0_loglik = ", f(as.numeric(logLik(m0))), "\n")
cat("lm0_rss = ", f(sum(resid(m0)^2)), "\n")
for (gname in c("g1", "g2")) {
  g <- get(gname)
  m1 <- lm(y ~ age + B + C + g)
  cs <- summary(m1)$coefficients
  tval <- cs["g", "t value"]
  lr <- 2 * (as.numeric(logLik(m1)) - as.numeric(logLik(m0)))
  sigma2 <- sum(resid(m0)^2) / (40 - 4)
  sc <- score(g, resid(m0), rep(1, 40), sigma2)
  cat("// ", gname, ": beta, se, t, wald log p (t, 35 df: log(2)+pt), lr, lr log p, U, V, T, score log p\n")
  cat("lm_", gname, " = {", f(c(cs["g", "Estimate"], cs["g", "Std. Error"], tval,
                              log(2) + pt(-abs(tval), 35, log.p = TRUE), lr,
                              pchisq(lr, 1, lower.tail = FALSE, log.p = TRUE), sc)), "}\n", sep = "")
  cat("// summary.lm Pr(>|t|) =", sprintf("%.15e", cs["g", "Pr(>|t|)"]), "\n")
}

cat("// glm: stats::glm(family=binomial, control=glm.control(epsilon=1e-14, maxit=100))\n")
ctl <- glm.control(epsilon = 1e-14, maxit = 100)
b0 <- glm(yb ~ age + B + C, family = binomial, control = ctl)
cat("glm0_coef = {", f(coef(b0)), "}\n")
cat("glm0_loglik = ", f(as.numeric(logLik(b0))), "\n")
mu <- fitted(b0)
for (gname in c("g1", "g2")) {
  g <- get(gname)
  b1 <- glm(yb ~ age + B + C + g, family = binomial, control = ctl)
  cs <- summary(b1)$coefficients
  z <- cs["g", "z value"]
  lr <- anova(b0, b1, test = "LRT")$Deviance[2]
  sc <- score(g, yb - mu, mu * (1 - mu), 1)
  cat("// ", gname, ": beta, se, wald chisq, wald log p, lr (anova LRT deviance), lr log p, U, V, T, score log p\n")
  cat("glm_", gname, " = {", f(c(cs["g", "Estimate"], cs["g", "Std. Error"], z^2,
                               pchisq(z^2, 1, lower.tail = FALSE, log.p = TRUE), lr,
                               pchisq(lr, 1, lower.tail = FALSE, log.p = TRUE), sc)), "}\n", sep = "")
  cat("// iterations:", b1$iter, " converged:", b1$converged, "\n")
  # summary.glm's SE uses the weights of the last IRLS iteration's start; the SE
  # at the converged fit itself is (X'WX)^-1 with W from fitted(b1):
  Xf <- model.matrix(b1); wf <- fitted(b1) * (1 - fitted(b1))
  cat("// SE at the converged fit, sqrt(diag(solve(t(X) %*% (X * w)))):",
      sprintf("%.16e", sqrt(diag(solve(t(Xf) %*% (Xf * wf))))["g"]), "\n")
}
