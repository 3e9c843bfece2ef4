// Null model fits: OLS by Householder QR, logistic regression by IRLS.
#include "tamis/null_model.hpp"

#include <cmath>
#include <sstream>

#include "logistic_fit.hpp"
#include "tamis/errors.hpp"

namespace tamis {
namespace {

constexpr double kPi = 3.14159265358979323846;

std::string trait_where(const std::string& trait_name) { return "trait '" + trait_name + "'"; }

// Keeps the columns that are not exactly collinear with earlier ones: each
// column is orthogonalised against the kept ones (modified Gram-Schmidt, with
// one re-orthogonalisation pass) and dropped when what remains is below 1e-9
// of its original norm.
std::vector<Eigen::Index> select_independent_columns(const Eigen::MatrixXd& design) {
  std::vector<Eigen::Index> kept;
  std::vector<Eigen::VectorXd> basis;
  for (Eigen::Index col = 0; col < design.cols(); ++col) {
    Eigen::VectorXd v = design.col(col);
    const double original = v.norm();
    if (!(original > 0.0)) continue;
    for (int pass = 0; pass < 2; ++pass) {
      for (const Eigen::VectorXd& q : basis) v -= q.dot(v) * q;
    }
    const double remaining = v.norm();
    if (remaining < 1e-9 * original) continue;
    basis.push_back(v / remaining);
    kept.push_back(col);
  }
  return kept;
}

// Thin Q (n x p) of a Householder QR.
Eigen::MatrixXd thin_q(const Eigen::HouseholderQR<Eigen::MatrixXd>& qr, Eigen::Index rows,
                       Eigen::Index cols) {
  return qr.householderQ() * Eigen::MatrixXd::Identity(rows, cols);
}

// Names the non-intercept column with the largest |b| * sd(x), the likely
// cause of separation.
std::string likely_separating_column(const Eigen::MatrixXd& design, const Eigen::VectorXd& b,
                                     const std::vector<std::string>& names) {
  double best = -1.0;
  std::string name;
  for (Eigen::Index col = 1; col < design.cols(); ++col) {
    const Eigen::VectorXd x = design.col(col);
    const double mean = x.mean();
    const double sd = std::sqrt((x.array() - mean).square().mean());
    const double size = std::fabs(b[col]) * sd;
    if (size > best) {
      best = size;
      name = names[static_cast<std::size_t>(col)];
    }
  }
  return name;
}

}  // namespace

NullModel fit_null_model(const std::string& trait_name, TraitKind kind, const Eigen::VectorXd& y,
                         const Eigen::MatrixXd& design, const std::vector<std::string>& column_names) {
  const std::string where = trait_where(trait_name);
  if (design.rows() != y.size() || static_cast<std::size_t>(design.cols()) != column_names.size()) {
    throw Error(ExitCode::internal, where,
                "fit_null_model: the design (" + std::to_string(design.rows()) + " x " +
                    std::to_string(design.cols()) + "), the trait (" + std::to_string(y.size()) +
                    " values) and the column names (" + std::to_string(column_names.size()) +
                    ") do not match");
  }
  const Eigen::Index n = y.size();
  if (!y.allFinite() || !design.allFinite()) {
    throw Error(ExitCode::model, where, "the trait or a covariate has a missing or non-finite value",
                "remove samples with missing values before fitting");
  }
  if (kind == TraitKind::binary) {
    for (Eigen::Index s = 0; s < n; ++s) {
      if (y[s] != 0.0 && y[s] != 1.0) {
        std::ostringstream text;
        text << "a binary trait must be coded 0/1, but sample " << s + 1 << " has " << y[s];
        throw Error(ExitCode::model, where, text.str(),
                    "code controls as 0 and cases as 1, or analyse it as a quantitative trait");
      }
    }
  }
  if (n == 0 || (y.array() == y[0]).all()) {
    throw Error(ExitCode::model, where,
                "the trait is constant over the " + std::to_string(n) + " analysed samples",
                kind == TraitKind::binary
                    ? "a binary trait needs both cases (1) and controls (0)"
                    : "check the trait column; a constant trait cannot be tested");
  }

  NullModel model;
  model.kind = kind;
  model.y = y;
  const std::vector<Eigen::Index> kept = select_independent_columns(design);
  {
    std::size_t next_kept = 0;
    for (Eigen::Index col = 0; col < design.cols(); ++col) {
      if (next_kept < kept.size() && kept[next_kept] == col) {
        ++next_kept;
      } else {
        model.dropped_columns.push_back(column_names[static_cast<std::size_t>(col)]);
      }
    }
  }
  const Eigen::Index p = static_cast<Eigen::Index>(kept.size());
  model.design.resize(n, p);
  for (Eigen::Index k = 0; k < p; ++k) {
    model.design.col(k) = design.col(kept[static_cast<std::size_t>(k)]);
    model.column_names.push_back(column_names[static_cast<std::size_t>(kept[static_cast<std::size_t>(k)])]);
  }
  if (n <= p + 1) {
    throw Error(ExitCode::model, where,
                "no residual degrees of freedom: " + std::to_string(n) + " samples for " +
                    std::to_string(p) + " null-model columns plus the variant (need n > p + 1)",
                "use fewer covariates, or more samples with the trait and every covariate present");
  }

  if (kind == TraitKind::quantitative) {
    Eigen::HouseholderQR<Eigen::MatrixXd> qr(model.design);
    model.coefficients = qr.solve(y);
    model.fitted = model.design * model.coefficients;
    model.residuals = y - model.fitted;
    model.weights = Eigen::VectorXd::Ones(n);
    model.basis = thin_q(qr, n, p);
    model.rss = model.residuals.squaredNorm();
    model.sigma2 = model.rss / static_cast<double>(n - p);
    model.log_likelihood =
        -0.5 * static_cast<double>(n) * (std::log(2.0 * kPi * model.rss / static_cast<double>(n)) + 1.0);
    model.iterations = 0;
    model.converged = true;
    return model;
  }

  // Logistic: start from the logit of the case fraction for an all-ones first column.
  Eigen::VectorXd start = Eigen::VectorXd::Zero(p);
  if (p > 0 && (model.design.col(0).array() == 1.0).all()) {
    const double mean = y.mean();
    start[0] = std::log(mean / (1.0 - mean));
  }
  detail::LogisticFit fit = detail::fit_logistic(model.design, y, start, 100);
  if (!fit.converged || fit.separated) {
    const std::string culprit = likely_separating_column(model.design, fit.coefficients, model.column_names);
    std::string problem = fit.separated
                              ? "the logistic null model separates cases from controls (fitted "
                                "probabilities of 0 or 1)"
                              : "the logistic null model did not converge in " +
                                    std::to_string(fit.iterations) + " iterations";
    std::string fix = culprit.empty()
                          ? "check the trait coding and the covariates"
                          : "drop the covariate that separates the cases from the controls (most "
                            "likely '" + culprit + "'), or merge its rare levels";
    throw Error(ExitCode::model, where, problem, fix);
  }
  model.coefficients = fit.coefficients;
  model.fitted = fit.mu;
  model.residuals = y - fit.mu;
  model.weights = fit.weights;
  Eigen::MatrixXd weighted = fit.weights.cwiseSqrt().asDiagonal() * model.design;
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(weighted);
  model.basis = thin_q(qr, n, p);
  model.sigma2 = 1.0;
  model.rss = fit.deviance;
  model.log_likelihood = -0.5 * fit.deviance;
  model.iterations = fit.iterations;
  model.converged = true;
  return model;
}

}  // namespace tamis
