# Reference values for tests/test_model_binary.cpp from R 4.2.2 (base and stats).
# Run: Rscript tests/reference/binary_reference.R
f <- function(x) paste(sprintf("%.17g", x), collapse = ", ")

cat("// Hardy-Weinberg exact test by full enumeration of the heterozygote count\n")
cat("// (probabilities from the multinomial formula with lfactorial; two-sided p =\n")
cat("// sum of the probabilities at most the observed one, relative tolerance 1e-7)\n")
hwe_log_p <- function(hom_ref, het, hom_alt) {
  N <- hom_ref + het + hom_alt
  n_a <- 2 * hom_ref + het
  n_b <- 2 * hom_alt + het
  h <- seq(n_a %% 2, min(n_a, n_b), by = 2)
  aa <- (n_a - h) / 2
  bb <- (n_b - h) / 2
  log_prob <- lfactorial(N) - lfactorial(aa) - lfactorial(h) - lfactorial(bb) + h * log(2) +
    lfactorial(n_a) + lfactorial(n_b) - lfactorial(2 * N)
  observed <- log_prob[h == het]
  keep <- log_prob[log_prob <= observed + log1p(1e-7)]
  top <- max(keep)
  top + log(sum(exp(keep - top)))
}
counts <- rbind(c(50, 40, 10), c(10, 0, 10), c(300, 150, 50), c(1000, 10, 5), c(0, 57, 0),
                c(120, 230, 90), c(500, 0, 500), c(17, 3, 0))
for (k in seq_len(nrow(counts))) {
  cat(sprintf("{%d, %d, %d, %s},\n", counts[k, 1], counts[k, 2], counts[k, 3],
              f(hwe_log_p(counts[k, 1], counts[k, 2], counts[k, 3]))))
}

cat("// Rank-based inverse normal transform: qnorm((rank(x) - 3/8) / (length(x) + 1/4))\n")
x <- c(3.2, 1.5, 3.2, -0.7, 8.1, 1.5, 1.5, 0, 12.4, -2.2, 3.2, 5.5, 1e-300, -1e300)
cat("x = {", f(x), "}\n")
cat("z = {", f(qnorm((rank(x) - 3/8) / (length(x) + 1/4))), "}\n")

cat("// Binomial 99.9% central bounds: qbinom(c(0.0005, 0.9995), size, prob)\n")
for (size in c(4000, 10000, 20000)) for (prob in c(0.01, 0.001)) {
  cat(sprintf("{%d, %s, %s},\n", size, f(prob), f(qbinom(c(0.0005, 0.9995), size, prob))))
}

cat("// Standard normal: qnorm(p) and pnorm(z, lower.tail = FALSE, log.p = TRUE)\n")
p <- c(1e-300, 1e-20, 1e-5, 0.01, 0.02425, 0.3, 0.5, 0.7, 0.975, 0.9999999)
cat("p = {", f(p), "}\n")
cat("qnorm = {", f(qnorm(p)), "}\n")
z <- c(-40, -3, -0.5, 0, 0.5, 3, 10, 40, 300)
cat("z = {", f(z), "}\n")
cat("log_upper = {", f(pnorm(z, lower.tail = FALSE, log.p = TRUE)), "}\n")
