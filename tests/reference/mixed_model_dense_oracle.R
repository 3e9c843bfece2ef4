# A dense oracle for the linear mixed model of tests/test_mixed_model.cpp,
# in base R 4.2.2 (stats::optimize, base::solve, chol, determinant): the
# full n x n matrix H = (1 - h2) I + h2 A, nothing exploited.
#
# Usage: Rscript mixed_model_dense_oracle.R DATA.tsv PAIRS.tsv
# DATA.tsv: y, c1, c2, then variants g1, g2, ... (header line).
# PAIRS.tsv: i, j, value (1-based, header line): the diagonal (i = j) and
# each off-diagonal pair once.
# Prints "key<TAB>value" lines: smallest_eigenvalue, h2_max, reml_h2,
# reml_loglik, reml_s2, ml0_h2, ml0_loglik, and per variant gJ: gJ_score (T),
# gJ_wald, gJ_lr, gJ_beta, gJ_se.
args <- commandArgs(trailingOnly = TRUE)
data <- read.delim(args[1])
pairs <- read.delim(args[2])
n <- nrow(data)
A <- matrix(0, n, n)
A[cbind(pairs$i, pairs$j)] <- pairs$value
A[cbind(pairs$j, pairs$i)] <- pairs$value
y <- data$y
X <- cbind(1, data$c1, data$c2)
variants <- grep("^g[0-9]+$", names(data), value = TRUE)
out <- function(key, value) cat(key, "\t", sprintf("%.15g", value), "\n", sep = "")

# The admissible range: the eigenvalues of H, 1 + h2 (lambda - 1), stay at
# or above 1e-6.
smallest <- min(eigen(A, symmetric = TRUE, only.values = TRUE)$values)
h2_max <- if (smallest >= 1e-6) 1 - 1e-6 else min(1 - 1e-6, (1 - 1e-6) / (1 - smallest))
out("smallest_eigenvalue", smallest)
out("h2_max", h2_max)

# GLS at h2: the whitened residual quadratic form, log|H| and log|X'H^-1 X|.
gls <- function(h2, X) {
  H <- (1 - h2) * diag(n) + h2 * A
  Hinv <- solve(H)
  XtHiX <- t(X) %*% Hinv %*% X
  beta <- solve(XtHiX, t(X) %*% Hinv %*% y)
  r <- y - X %*% beta
  list(q = drop(t(r) %*% Hinv %*% r), log_det_h = determinant(H)$modulus[1],
       log_det_xthx = determinant(XtHiX)$modulus[1], beta = drop(beta), XtHiX = XtHiX, Hinv = Hinv)
}
reml <- function(h2) {
  f <- gls(h2, X)
  df <- n - ncol(X)
  -0.5 * (df * log(f$q / df) + f$log_det_h + f$log_det_xthx + df * (1 + log(2 * pi)))
}
ml <- function(h2, X) {
  f <- gls(h2, X)
  -0.5 * (n * log(f$q / n) + f$log_det_h + n * (1 + log(2 * pi)))
}
maximise <- function(f) optimize(f, c(0, h2_max), maximum = TRUE, tol = 1e-12)

fit <- maximise(reml)
h2 <- fit$maximum
at <- gls(h2, X)
s2 <- at$q / (n - ncol(X))
out("reml_h2", h2)
out("reml_loglik", fit$objective)
out("reml_s2", s2)

# The score test at the REML fit: T = (g'Py)^2 / (g'Pg) with
# P = V^-1 - V^-1 X (X'V^-1 X)^-1 X'V^-1 and V = s2 H.
Vinv <- at$Hinv / s2
P <- Vinv - Vinv %*% X %*% solve(t(X) %*% Vinv %*% X, t(X) %*% Vinv)

null_fit <- maximise(function(h2) ml(h2, X))
out("ml0_h2", null_fit$maximum)
out("ml0_loglik", null_fit$objective)

for (variant in variants) {
  g <- data[[variant]]
  out(paste0(variant, "_score"), drop(t(g) %*% P %*% y)^2 / drop(t(g) %*% P %*% g))
  X1 <- cbind(X, g)
  full <- maximise(function(h2) ml(h2, X1))
  f1 <- gls(full$maximum, X1)
  s2_ml <- f1$q / n
  last <- ncol(X1)
  se <- sqrt(s2_ml * solve(f1$XtHiX)[last, last])
  out(paste0(variant, "_beta"), f1$beta[last])
  out(paste0(variant, "_se"), se)
  out(paste0(variant, "_wald"), (f1$beta[last] / se)^2)
  out(paste0(variant, "_lr"), 2 * (full$objective - null_fit$objective))
  out(paste0(variant, "_ml1_h2"), full$maximum)
}
