# A dense oracle for the logistic mixed model of
# tests/test_logistic_mixed_model.cpp, in base R 4.2.2 (chol, chol2inv,
# solve, uniroot): the full n x n working covariance, nothing exploited.
#
# Usage: Rscript logistic_mixed_model_dense_oracle.R DATA.tsv PAIRS.tsv TAU [POINTS.tsv]
# DATA.tsv: y (0/1), c1, c2, then variants g1, g2, ... (header line; other
# columns ignored). PAIRS.tsv: i, j, value (1-based, header line): the
# diagonal (i = j) and each off-diagonal pair once. TAU: the variance of the
# random effects, b ~ N(0, TAU A), held fixed.
#
# At that tau, beta and b are iterated as penalised quasi-likelihood does
# (Breslow & Clayton 1993): working response yw = eta + (y - mu) / w,
# w = mu (1 - mu), Sigma = W^-1 + tau A, beta the GLS estimate,
# b = tau A Sigma^-1 (yw - X beta), eta = X beta + b, until no eta moves by
# 1e-12. At the fixed point, with P = Sigma^-1 - Sigma^-1 X (X'Sigma^-1 X)^-1
# X'Sigma^-1:
#   gJ_u = g'(y - mu), gJ_v = g'Pg (the score and its variance)
#   beta_K, b_I (I = 1..n), mu_I
#   reml_tau: the REML estimate of tau in the working model of the fixed
#     point (yw and W held): the root of the REML score
#     (yw'P A P yw - tr(P A)) / 2, or 0 when the score is negative at 0.
#     At a PQL fixed point it equals TAU.
#   reml_loglik: that working model's REML log-likelihood at TAU,
#     -(log|Sigma| + log|X'Sigma^-1 X| + yw'P yw + (n - p) log 2 pi) / 2
#   iterations, last_change
# With POINTS.tsv (columns name, variant ("none" or gJ), tau, beta: the
# coefficients separated by commas, the variant's last), the Laplace
# approximation of the marginal log-likelihood at each point,
#   l(beta, tau) = sum log p(y | X beta + b) - b'(tau A)^-1 b / 2
#                  - log|I + tau W^1/2 A W^1/2| / 2
# with b the conditional mode (Newton's method with step halving, to 1e-12)
# and W at the mode:
#   NAME_loglik, and its derivatives by central differences,
#   NAME_gradient_tau (one-sided at tau = 0), NAME_gradient_beta_K.
args <- commandArgs(trailingOnly = TRUE)
data <- read.delim(args[1])
pairs <- read.delim(args[2])
tau <- as.numeric(args[3])
n <- nrow(data)
A <- matrix(0, n, n)
A[cbind(pairs$i, pairs$j)] <- pairs$value
A[cbind(pairs$j, pairs$i)] <- pairs$value
y <- data$y
X <- cbind(1, data$c1, data$c2)
out <- function(key, value) cat(key, "\t", sprintf("%.17g", value), "\n", sep = "")

working_model <- function(eta, tau) {
  mu <- plogis(eta)
  w <- mu * (1 - mu)
  yw <- eta + (y - mu) / w
  Sigma <- diag(1 / w) + tau * A
  Si <- chol2inv(chol(Sigma))
  SiX <- Si %*% X
  XtSiX <- crossprod(X, SiX)
  beta <- solve(XtSiX, crossprod(SiX, yw))
  alpha <- Si %*% (yw - X %*% beta)
  P <- Si - SiX %*% solve(XtSiX, t(SiX))
  list(mu = mu, w = w, yw = yw, Sigma = Sigma, beta = drop(beta), b = drop(tau * A %*% alpha), P = P,
       XtSiX = XtSiX)
}

eta <- glm(y ~ X - 1, family = binomial)$linear.predictors
for (iteration in 1:200) {
  fit <- working_model(eta, tau)
  eta_new <- drop(X %*% fit$beta) + fit$b
  change <- max(abs(eta_new - eta))
  eta <- eta_new
  if (change < 1e-12) break
}
out("iterations", iteration)
out("last_change", change)
# The fixed point's own working model (weights at the final eta).
fit <- working_model(eta, tau)
for (k in seq_along(fit$beta)) out(paste0("beta_", k - 1), fit$beta[k])
for (i in seq_len(n)) out(paste0("b_", i), fit$b[i])
for (i in seq_len(n)) out(paste0("mu_", i), fit$mu[i])
for (variant in grep("^g[0-9]+$", names(data), value = TRUE)) {
  g <- data[[variant]]
  out(paste0(variant, "_u"), sum(g * (y - fit$mu)))
  out(paste0(variant, "_v"), drop(crossprod(g, fit$P %*% g)))
}

# REML in the working model of the fixed point: yw and W held, tau free.
W_inverse <- diag(1 / fit$w)
yw <- fit$yw
reml_score <- function(t) {
  Sigma <- W_inverse + t * A
  Si <- chol2inv(chol(Sigma))
  SiX <- Si %*% X
  P <- Si - SiX %*% solve(crossprod(X, SiX), t(SiX))
  Py <- P %*% yw
  (drop(crossprod(Py, A %*% Py)) - sum(P * A)) / 2
}
reml_tau <- if (reml_score(0) <= 0) 0 else {
  upper <- max(1, 4 * tau)
  while (reml_score(upper) > 0) upper <- 2 * upper
  uniroot(reml_score, c(0, upper), tol = 1e-15, maxiter = 200)$root
}
out("reml_tau", reml_tau)
log_det <- function(m) determinant(m, logarithm = TRUE)$modulus[1]
out("reml_loglik", -(log_det(fit$Sigma) + log_det(fit$XtSiX) + drop(crossprod(yw, fit$P %*% yw)) +
                       (n - ncol(X)) * log(2 * pi)) / 2)

# The Laplace approximation at given beta and tau (b = tau A alpha; Newton's
# step is b = tau A (I + W tau A)^-1 (W b + y - mu)). Each point's
# evaluations start from the previous mode (the same b), which is near.
log_density <- function(eta) sum(y * eta - pmax(eta, 0) - log1p(exp(-abs(eta))))
last_mode <- list(b = rep(0, n))
laplace <- function(beta, tau, design) {
  offset <- drop(design %*% beta)
  if (tau == 0) return(log_density(offset))
  K <- tau * A
  objective <- function(alpha, b) log_density(offset + b) - sum(b * alpha) / 2
  b <- last_mode$b
  alpha <- solve(K, b)
  current <- objective(alpha, b)
  for (step in 1:500) {
    mu <- plogis(offset + b)
    w <- mu * (1 - mu)
    alpha_new <- solve(diag(n) + w * K, w * b + y - mu)
    b_new <- drop(K %*% alpha_new)
    value <- objective(alpha_new, b_new)
    for (halving in 1:60) {
      if (value >= current) break
      alpha_new <- (alpha_new + alpha) / 2
      b_new <- (b_new + b) / 2
      value <- objective(alpha_new, b_new)
    }
    change <- max(abs(b_new - b))
    alpha <- alpha_new
    b <- b_new
    current <- value
    if (change < 1e-12 * (1 + max(abs(b)))) break
  }
  last_mode$b <<- b
  mu <- plogis(offset + b)
  root_w <- sqrt(mu * (1 - mu))
  current - log_det(diag(n) + root_w * t(root_w * K)) / 2
}
if (length(args) >= 4) {
  points <- read.delim(args[4], colClasses = c("character", "character", "numeric", "character"))
  for (row in seq_len(nrow(points))) {
    name <- points$name[row]
    design <- if (points$variant[row] == "none") X else cbind(X, data[[points$variant[row]]])
    beta <- as.numeric(strsplit(points$beta[row], ",")[[1]])
    point_tau <- points$tau[row]
    last_mode <- list(b = rep(0, n))
    out(paste0(name, "_loglik"), laplace(beta, point_tau, design))
    step <- 1e-5 * max(point_tau, 1e-2)
    out(paste0(name, "_gradient_tau"),
        if (point_tau > step) (laplace(beta, point_tau + step, design) - laplace(beta, point_tau - step, design)) / (2 * step)
        else (laplace(beta, point_tau + step, design) - laplace(beta, point_tau, design)) / step)
    for (k in seq_along(beta)) {
      shift <- replace(rep(0, length(beta)), k, 1e-5)
      out(paste0(name, "_gradient_beta_", k - 1),
          (laplace(beta + shift, point_tau, design) - laplace(beta - shift, point_tau, design)) / 2e-5)
    }
  }
}
