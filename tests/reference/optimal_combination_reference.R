# Reference values for the set tests in tests/test_set_tests.cpp, computed in
# base R (R 4.2.2: eigen, integrate, uniroot, pchisq, qchisq) by routes of its
# own:
# - burden: B = w'u, V = w' Phi w, ln P(chisq1 > B^2 / V) by pchisq;
# - variance component: Q = sum (w u)^2 and the eigenvalues of
#   K = diag(w) Phi diag(w) by eigen;
# - tails of chi-square mixtures by the Laplace inversion folded onto the
#   real axis (below: integrals of positive functions, which integrate takes
#   to 1e-13, where Imhof's oscillating integral over (0, Inf) stops with
#   "roundoff error");
# - the optimal combination's p-value (Lee et al. 2012, AJHG 91:224-237,
#   Appendix) in its published form 1 - int F_kappa(delta(x)) dchisq(x, 1) dx,
#   with q_min(rho) from uniroot on that tail, F_kappa from that tail on the
#   eigenvalues of K - K1 1'K / 1'K1 standardised to kappa's mean and variance,
#   and R_rho^1/2 from eigen.
# The cases are built from integer formulas that the C++ test repeats.
# Run: Rscript tests/reference/optimal_combination_reference.R
# It prints key<TAB>value lines.

options(digits = 17)

# P(Q > q) = (1/pi) sum_{j odd} (-1)^((j-1)/2) int_{s_j}^{s_{j+1}} e^{-xq} / (x sqrt(|prod_k (1 - 2 x lambda_k)|)) dx,
# s_j = 1 / (2 lambda_j) for the distinct eigenvalues sorted down, s_{m+1} = Inf:
# the Laplace-transform inversion with the contour folded onto the branch
# cuts of the real axis (checked against Imhof's formula in mpmath by
# tests/reference/mixture_tail_reference.py). On (s_j, s_{j+1}) the
# substitution x = s_j + (s_{j+1} - s_j)(1 - cos(phi)) / 2 takes out the two
# inverse square roots, on the last x = s_m + v^2.
mixture_upper <- function(lambda, q) {
  lambda <- sort(lambda[lambda > 1e-12 * max(lambda)], decreasing = TRUE)
  if (q <= 0) return(1)
  m <- length(lambda)
  s <- 1 / (2 * lambda)
  log_others <- function(others, x) {
    if (length(others) == 0) return(0 * x)
    colSums(log(abs(1 - 2 * outer(others, x))))
  }
  total <- 0
  for (j in seq(1, m, by = 2)) {
    sign <- if ((j - 1) %% 4 == 0) 1 else -1
    if (j < m) {
      others <- lambda[-c(j, j + 1)]
      integrand <- function(phi) {
        x <- s[j] + (s[j + 1] - s[j]) * (1 - cos(phi)) / 2
        exp(-x * q - 0.5 * log_others(others, x)) / (x * sqrt(4 * lambda[j] * lambda[j + 1]))
      }
      value <- integrate(integrand, 0, pi, subdivisions = 2000L, rel.tol = 1e-13)$value
    } else {
      others <- lambda[-j]
      integrand <- function(v) {
        x <- s[j] + v^2
        2 * exp(-x * q - 0.5 * log_others(others, x)) / (x * sqrt(2 * lambda[j]))
      }
      value <- integrate(integrand, 0, Inf, subdivisions = 2000L, rel.tol = 1e-13)$value
    }
    total <- total + sign * value
  }
  total / pi
}

make_case <- function(m, scale) {
  j <- 0:(m - 1)
  a <- outer(j, 0:2, function(row, col) (((row + 1) * (col + 2)) %% 7 - 3) / 4)
  phi <- a %*% t(a) + diag(0.2 + (j %% 5) / 10)
  u <- scale * (((j * 5 + 3) %% 9) - 4) / 2 + scale * 0.7
  w <- 1 + (j %% 3) / 2
  list(u = u, phi = phi, w = w)
}

rho_grid <- c(0, 0.01, 0.04, 0.09, 0.16, 0.25, 0.5, 1)

symmetric_root <- function(r) {
  e <- eigen(r, symmetric = TRUE)
  e$vectors %*% diag(sqrt(pmax(e$values, 0)), nrow(r)) %*% t(e$vectors)
}

rho_eigenvalues <- function(k, rho) {
  m <- nrow(k)
  if (rho == 1) return(sum(k))
  root <- symmetric_root((1 - rho) * diag(m) + rho * matrix(1, m, m))
  pmax(eigen(root %*% k %*% root, symmetric = TRUE, only.values = TRUE)$values, 0)
}

mixture_quantile <- function(lambda, log_p) {
  if (length(lambda) == 1) return(lambda * qchisq(log_p, 1, lower.tail = FALSE, log.p = TRUE))
  low <- max(lambda) * qchisq(log_p, 1, lower.tail = FALSE, log.p = TRUE)
  high <- 2 * sum(lambda) * qchisq(log_p, 1, lower.tail = FALSE, log.p = TRUE)
  uniroot(function(q) log(mixture_upper(lambda, q)) - log_p, c(low, high), tol = 1e-13 * high)$root
}

optimal_p <- function(k, log_t) {
  s <- sum(k)
  k1 <- as.vector(k %*% rep(1, nrow(k)))
  tau <- rho_grid * s + (1 - rho_grid) * sum(k1^2) / s
  q_min <- sapply(rho_grid, function(rho) mixture_quantile(rho_eigenvalues(k, rho), log_t))
  residual <- k - outer(k1, k1) / s
  eta <- pmax(eigen(residual, symmetric = TRUE, only.values = TRUE)$values, 0)
  eta <- eta[eta > 1e-12 * max(eta)]
  mu <- sum(eta)
  var_eta <- 2 * sum(eta^2)
  var_zeta <- 4 * as.numeric(t(k1) %*% residual %*% k1) / s
  inner <- rho_grid < 1
  delta <- function(x) min((q_min[inner] - tau[inner] * x) / (1 - rho_grid[inner]))
  f_kappa <- function(d) {
    on_eta <- (d - mu) * sqrt(var_eta / (var_eta + var_zeta)) + mu
    if (on_eta <= 0) return(0)
    1 - mixture_upper(eta, on_eta)
  }
  x_max <- q_min[rho_grid == 1] / tau[rho_grid == 1]
  # x = v^2 turns dchisq(x, 1) dx into 2 dnorm(v) dv, without the singularity at 0.
  integrand <- function(v) sapply(v, function(one) f_kappa(delta(one^2))) * 2 * dnorm(v)
  1 - integrate(integrand, 0, sqrt(x_max), subdivisions = 2000L, rel.tol = 1e-10, abs.tol = 1e-15)$value
}

emit <- function(key, value) cat(key, "\t", format(value, digits = 17), "\n", sep = "")

cases <- list(list(name = "m4", m = 4, scale = 1.1), list(name = "m8", m = 8, scale = 0.9),
              list(name = "m15", m = 15, scale = 0.6))
for (case in cases) {
  set <- make_case(case$m, case$scale)
  k <- diag(set$w) %*% set$phi %*% diag(set$w)
  burden <- sum(set$w * set$u)
  burden_variance <- as.numeric(t(set$w) %*% set$phi %*% set$w)
  emit(paste0(case$name, "_burden_score"), burden)
  emit(paste0(case$name, "_burden_variance"), burden_variance)
  emit(paste0(case$name, "_burden_log_p"), pchisq(burden^2 / burden_variance, 1, lower.tail = FALSE, log.p = TRUE))
  q <- sum((set$w * set$u)^2)
  emit(paste0(case$name, "_variance_q"), q)
  lambda <- eigen(k, symmetric = TRUE, only.values = TRUE)$values
  for (index in seq_along(lambda)) emit(paste0(case$name, "_eigenvalue_", index), lambda[index])
  rho_log_p <- sapply(rho_grid, function(rho) {
    q_rho <- (1 - rho) * q + rho * burden^2
    if (rho == 1) return(pchisq(q_rho / sum(k), 1, lower.tail = FALSE, log.p = TRUE))
    log(mixture_upper(rho_eigenvalues(k, rho), q_rho))
  })
  for (index in seq_along(rho_grid)) emit(paste0(case$name, "_rho_log_p_", index), rho_log_p[index])
  emit(paste0(case$name, "_optimal_log_p"), log(optimal_p(k, min(rho_log_p))))
  # The integral on its own, for smallest p-values of 1e-2 and 1e-4.
  for (exponent in c(2, 4)) {
    emit(paste0(case$name, "_optimal_log_p_at_1e-", exponent), log(optimal_p(k, log(10^-exponent))))
  }
}
