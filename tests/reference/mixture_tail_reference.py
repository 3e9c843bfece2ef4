#!/usr/bin/python3
# Reference values for the mixture-of-chi-square tails in tests/test_set_tests.cpp:
# P(Q > q) for Q = sum_k lambda_k X_k, X_k independent chi-square(1), computed
# with mpmath (Debian python3-mpmath 1.2.1) at 30 significant digits by two
# routes that share no code with tamis:
#
# - Imhof (1961), Biometrika 48:419-426, eq. 3.2 for central chi-square(1) terms:
#     P(Q > q) = 1/2 + (1/pi) int_0^inf sin(theta(u)) / (u rho(u)) du,
#     theta(u) = 1/2 sum_k atan(lambda_k u) - q u / 2,
#     rho(u)   = prod_k (1 + lambda_k^2 u^2)^(1/4),
#   integrated by mpmath.quadosc (the integrand oscillates with angular
#   frequency q/2); used for p from 0.5 down to 1e-12.
# - For the far tail, where Imhof's 1/2 + integral would need hundreds of
#   digits, the Bromwich integral P(Q > q) = (1/2 pi i) int M(s) e^{-sq} / s ds
#   (M(s) = prod_k (1 - 2 s lambda_k)^(-1/2), eigenvalues distinct, sorted
#   down, s_j = 1/(2 lambda_j)) with the contour folded onto the branch cuts of
#   the real axis: across (s_j, s_{j+1}) M jumps by i^j, so
#     P(Q > q) = (1/pi) sum_{j odd} (-1)^((j-1)/2)
#                int_{s_j}^{s_{j+1}} e^{-xq} / (x sqrt(|prod_k (1 - 2 x lambda_k)|)) dx
#   (s_{m+1} = infinity), integrated by mpmath.quad (tanh-sinh, which takes the
#   inverse square-root singularities at the ends). Every term is a positive
#   integral, so p = 1e-300 keeps its digits; on each range x = s_j + w^2
#   takes out the singularity at its start and the w range is broken at
#   2^k / sqrt(q), the scale of e^{-xq}, for tanh-sinh. The two routes are
#   checked against each other where both apply, and the far tail of
#   lambda = (1, 0.3) also against the convolution
#   P(X_1 + 0.3 X_2 > q) = int f_1(x) P(X_1 > q - 0.3 x) dx (check_two_by_convolution).
#   The set with repeated eigenvalues, chi-square(6) + 0.5 chi-square(4), has
#   its far tail from that convolution written with the chi-square(6) and (4)
#   tails in closed form (repeated_by_convolution, checked against Imhof).
#
# Run: /usr/bin/python3 tests/reference/mixture_tail_reference.py [SET ...]   (all sets: about 10 minutes)
# It prints the C++ initialisers pasted into tests/test_set_tests.cpp.
import sys

import mpmath
from mpmath import mp, mpf

mp.dps = 30

EIGENVALUE_SETS = {
    "two": [mpf(1), mpf("0.3")],
    "five": [mpf("3.2"), mpf("1.1"), mpf("0.75"), mpf("0.2"), mpf("0.05")],
    "twenty_geometric": [2 * mpf("0.8") ** k for k in range(20)],
    "two_hundred_wide": [1 / mpf(1 + k) ** 2 for k in range(200)],
    "huge_ratio": [mpf(10) ** 4, mpf(1), mpf("1e-3"), mpf("1e-6"), mpf("3e-7")],
    "repeated": [mpf(1)] * 6 + [mpf("0.5")] * 4,
}

# q as mean + sd * z for these z (Imhof), then far-tail q as multiples of the
# largest eigenvalue (branch cuts; the convolution for the repeated set).
Z_VALUES = [-0.5, 0, 1, 3, 6, 10, 15, 21, 28]
Z_VALUES_LARGE = [-0.5, 1, 6, 15, 21]  # fewer for m = 200: Imhof's integrand costs 200 arc tangents
FAR_MULTIPLES = [60, 200, 600, 1300]


def imhof_upper(lambdas, q):
    def integrand(u):
        if u == 0:
            return (sum(lambdas) - q) / 2
        theta = sum(mpmath.atan(lam * u) for lam in lambdas) / 2 - q * u / 2
        rho = mpmath.fprod((1 + (lam * u) ** 2) ** mpf("0.25") for lam in lambdas)
        return mpmath.sin(theta) / (u * rho)

    return mpf(1) / 2 + mpmath.quadosc(integrand, [0, mpmath.inf], omega=q / 2) / mpmath.pi


def branch_cut_upper(lambdas, q):
    lambdas = sorted(lambdas, reverse=True)
    m = len(lambdas)
    points = [1 / (2 * lam) for lam in lambdas] + [mpmath.inf]

    def segment(index):
        # mpmath.quad's tolerance is absolute, so e^{-s_1 q} is taken out of
        # the integrand (and put back at the end). x = s_j + w^2 takes out
        # the inverse square root at the start
        # (|1 - 2 x lambda_j| = 2 lambda_j w^2 exactly); e^{-xq} falls by e
        # over w^2 = 1/q, so the w range is broken geometrically from there
        # for tanh-sinh.
        start, end = points[index], points[index + 1]
        others = lambdas[:index] + lambdas[index + 1:]

        def integrand(w):
            x = start + w * w
            product = mpmath.fprod(abs(1 - 2 * x * lam) for lam in others)
            return 2 * mpmath.exp(-(x - points[0]) * q) / (x * mpmath.sqrt(2 * lambdas[index] * product))

        cuts = [mpf(0)]
        width = 1 / mpmath.sqrt(q)
        while end == mpmath.inf or width * width < end - start:
            cuts.append(width)
            width *= 2
            if end == mpmath.inf and width * width * q > 2000:
                break
        cuts.append(mpmath.sqrt(end - start) if end != mpmath.inf else mpmath.inf)
        return mpmath.quad(integrand, cuts)

    total = mpf(0)
    for j in range(1, m + 1, 2):
        sign = 1 if (j - 1) % 4 == 0 else -1
        total += sign * segment(j - 1)
    return total * mpmath.exp(-points[0] * q) / mpmath.pi


def repeated_by_convolution(q):
    # The "repeated" set is chi-square(6) + 0.5 chi-square(4), without
    # distinct eigenvalues for the folded integral: P(Q > q) =
    # int_0^q y e^{-y} P(chi-square(6) > q - y) dy + P(chi-square(4) > 2q),
    # with P(chi-square(6) > x) = e^{-x/2} (1 + x/2 + x^2/8) and
    # P(chi-square(4) > x) = e^{-x/2} (1 + x/2); e^{-q/2} taken out.
    def scaled(y):
        x = q - y
        return y * mpmath.exp(-y / 2) * (1 + x / 2 + x * x / 8)

    cuts = [mpf(0)] + [mpf(2) ** k for k in range(0, 40) if mpf(2) ** k < q] + [q]
    return mpmath.quad(scaled, cuts) * mpmath.exp(-q / 2) + mpmath.exp(-q) * (1 + q)


def check_two_by_convolution():
    def chisq1_upper(x):
        return mpmath.erfc(mpmath.sqrt(x / 2)) if x > 0 else mpf(1)

    for q in [mpf(200), mpf(1300)]:
        c = mpf("0.3")
        # x = v^2; e^{q/2} taken out of the integrand for mpmath.quad's absolute tolerance.
        top = mpmath.sqrt(q / c)
        cuts = [mpf(0)] + [mpf(k) / 4 for k in range(1, 200) if mpf(k) / 4 < top] + [top]
        scaled = lambda v: 2 * mpmath.npdf(v) * chisq1_upper(q - c * v * v) * mpmath.exp(q / 2)
        direct = mpmath.quad(scaled, cuts) * mpmath.exp(-q / 2) + chisq1_upper(q / c)
        folded = branch_cut_upper([mpf(1), c], q)
        assert abs(folded / direct - 1) < mpf("1e-15"), (q, direct, folded)


def main(selected):
    check_two_by_convolution()
    repeated = EIGENVALUE_SETS["repeated"]
    assert abs(repeated_by_convolution(mpf(40)) / imhof_upper(repeated, mpf(40)) - 1) < mpf("1e-15")
    print("// Generated by tests/reference/mixture_tail_reference.py (mpmath 1.2.1, 30 digits).")
    print("// {set, q, ln p, route}")
    for name, lambdas in EIGENVALUE_SETS.items():
        if selected and name not in selected:
            continue
        mean = sum(lambdas)
        sd = mpmath.sqrt(2 * sum(lam * lam for lam in lambdas))
        distinct = len(set(lambdas)) == len(lambdas)
        for z in Z_VALUES if len(lambdas) <= 20 else Z_VALUES_LARGE:
            q = mean + sd * z
            if q <= 0:
                continue
            p = imhof_upper(lambdas, q)
            if p < mpf("1e-12"):
                break
            if distinct and p < mpf("1e-3") and len(lambdas) <= 20:
                check = branch_cut_upper(lambdas, q)
                assert abs(check / p - 1) < mpf("1e-15"), (name, q, p, check)
            print('    {"%s", %s, %s, "imhof"},' % (name, mpmath.nstr(q, 20), mpmath.nstr(mpmath.log(p), 20)))
        for multiple in FAR_MULTIPLES:
            q = max(lambdas) * multiple
            if distinct:
                p, route = branch_cut_upper(lambdas, q), "branch_cut"
            else:
                p, route = repeated_by_convolution(q), "convolution"
            print('    {"%s", %s, %s, "%s"},' % (name, mpmath.nstr(q, 20), mpmath.nstr(mpmath.log(p), 20), route))


if __name__ == "__main__":
    main(sys.argv[1:])  # optionally the names of the sets to print
