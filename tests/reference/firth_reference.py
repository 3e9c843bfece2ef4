#!/usr/bin/python3
# Reference values for the Firth tests in tests/test_model_binary.cpp: an
# independent maximisation of Firth's penalised log-likelihood
#   l*(b) = l(b) + 1/2 ln det(X_f' W X_f),   X_f = [1, x1, x2, g],
# with SciPy's general-purpose optimisers (BFGS on numerical gradients, then
# Nelder-Mead polishing), no modified-score iteration involved.
# Run: /usr/bin/python3 tests/reference/firth_reference.py   (python3-scipy from Debian)
# The dataset is built from integer formulas that the C++ test repeats exactly.
import numpy as np
import scipy
from scipy.optimize import minimize

n = 60
s = np.arange(n)
x1 = (((s * 37) % 23) - 11) / 5.0
x2 = ((s * 11 + s // 7) % 2).astype(float)
y = ((((s * s * 7 + s * 5 + 3) % 17) + 3 * x2 + ((s * 37) % 23) // 6) > 14).astype(float)
variants = {
    # every carrier is a case: the ordinary likelihood has no finite maximum
    "separated": ((y == 1) & (s % 4 == 1)).astype(float),
    # all carriers but one are cases
    "near_separated": (((y == 1) & (s % 5 == 2)) | ((y == 0) & (s % 29 == 3))).astype(float),
}


def penalized_log_likelihood(beta, design):
    eta = design @ beta
    log_lik = np.sum(y * eta - np.logaddexp(0.0, eta))
    mu = 1.0 / (1.0 + np.exp(-eta))
    information = design.T @ (design * (mu * (1.0 - mu))[:, None])
    sign, log_det = np.linalg.slogdet(information)
    return log_lik + 0.5 * log_det


def maximise(objective, start):
    first = minimize(objective, start, method="BFGS", options={"gtol": 1e-11, "maxiter": 10000})
    polished = minimize(objective, first.x, method="Nelder-Mead",
                        options={"xatol": 1e-13, "fatol": 1e-16, "maxiter": 200000, "maxfev": 400000})
    best = polished if polished.fun <= first.fun else first
    return best.x, -best.fun


print("# scipy", scipy.__version__, "numpy", np.__version__)
print("# cases", int(y.sum()), "of", n)
for name, g in variants.items():
    design = np.column_stack([np.ones(n), x1, x2, g])
    full_beta, full_value = maximise(lambda b: -penalized_log_likelihood(b, design), np.zeros(4))
    # The null fit holds the variant's coefficient at 0 but keeps its column in the penalty.
    null_beta3, null_value = maximise(
        lambda b: -penalized_log_likelihood(np.append(b, 0.0), design), np.zeros(3))
    eta = design @ full_beta
    mu = 1.0 / (1.0 + np.exp(-eta))
    information = design.T @ (design * (mu * (1.0 - mu))[:, None])
    se = np.sqrt(np.linalg.inv(information)[3, 3])
    print(f"{name}: carriers {int(g.sum())}, carrier cases {int((g * y).sum())}")
    print(f"  beta = {full_beta[3]!r}")
    print(f"  se = {se!r}")
    print(f"  full_penalized_log_likelihood = {full_value!r}")
    print(f"  null_penalized_log_likelihood = {null_value!r}")
    print(f"  penalized_lr = {2.0 * (full_value - null_value)!r}")
    print(f"  full_coefficients = {list(full_beta)!r}")
