"""The variance-component test's p-values of `tamis scan --sets` against an
independent evaluation of the mixture-of-chi-square tail.

Reads mixtures.tsv from check_sets_against_r.R: per set, tamis's variance_p,
and R's Q and eigenvalues of diag(w) Phi diag(w). For Q = sum_k lambda_k X_k,
X_k independent chi-square(1), Imhof (1961, Biometrika 48:419-426, eq. 3.2
with h_k = 1 and no non-centrality) gives

  P(Q > q) = 1/2 + (1/pi) int_0^inf sin(theta(u)) / (u rho(u)) du,
  theta(u) = (1/2) sum_k arctan(lambda_k u) - (1/2) q u,
  rho(u)   = prod_k (1 + lambda_k^2 u^2)^(1/4),

evaluated here with mpmath's quadosc (the integrand oscillates at angular
frequency q/2 for large u) at 20 significant digits. Reference: mpmath as
Debian's python3-mpmath ships it (version printed). Tolerance: 1e-6
relative where tamis's p is above 1e-10 (below that tamis switches to the
saddlepoint approximation, whose error is relative too but not that small;
those rows are printed, not asserted).

Run: /usr/bin/python3 imhof_upper_tail.py mixtures.tsv
"""
import multiprocessing
import sys

import mpmath
from mpmath import mp, mpf

TOLERANCE = 1e-6
ASSERTED_ABOVE = 1e-10


def imhof_upper_tail(eigenvalues, q):
    mp.dps = 20
    lambdas = [mpf(value) for value in eigenvalues if value > 0]
    q = mpf(q)

    def integrand(u):
        if u == 0:
            return (sum(lambdas) - q) / 2  # the limit as u -> 0
        theta = mpmath.fsum(mpmath.atan(value * u) for value in lambdas) / 2 - q * u / 2
        log_rho = mpmath.fsum(mpmath.log1p((value * u) ** 2) for value in lambdas) / 4
        return mpmath.sin(theta) / (u * mpmath.exp(log_rho))

    return float(mpf(0.5) + mpmath.quadosc(integrand, [0, mpmath.inf], omega=q / 2) / mpmath.pi)


def evaluate(row):
    return imhof_upper_tail(row["eigenvalues"], row["q"])


def main(path):
    print("mpmath", mpmath.__version__)
    rows = []
    with open(path) as lines:
        header = lines.readline().rstrip("\n").split("\t")
        for line in lines:
            row = dict(zip(header, line.rstrip("\n").split("\t")))
            row["q"] = float(row["q"])
            row["variance_p"] = float(row["variance_p"])
            row["eigenvalues"] = [float(value) for value in row["eigenvalues"].split(",")]
            rows.append(row)
    if len(rows) < 10:
        sys.exit(f"only {len(rows)} sets in {path}")
    with multiprocessing.Pool(2) as pool:
        references = pool.map(evaluate, rows)
    worst = 0.0
    for row, reference in zip(rows, references):
        error = abs(row["variance_p"] - reference) / reference
        asserted = row["variance_p"] > ASSERTED_ABOVE
        if asserted:
            worst = max(worst, error)
        print(f"{row['trait']}\t{row['set']}\t{row['variance_method']}\tm={len(row['eigenvalues'])}\t"
              f"tamis {row['variance_p']:.10g}\timhof {reference:.10g}\trelative error {error:.3g}"
              + ("" if asserted else " (not asserted: p <= 1e-10)"))
    verdict = "ok" if worst <= TOLERANCE else "FAILED"
    print(f"variance_p against Imhof's integral: max relative error {worst:.3g} (tolerance {TOLERANCE:g}) {verdict}")
    if worst > TOLERANCE:
        sys.exit(1)


if __name__ == "__main__":
    main(sys.argv[1])
