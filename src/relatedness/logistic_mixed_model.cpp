// The logistic mixed model: the PQL fit of the null model, the whitening of
// the score test, and the Laplace fits of the confirmations (see
// logistic_mixed_model.hpp for the formulas).
//
// The fixed effects are carried on an orthonormal basis Q of the design
// (X = Q R), which keeps every small Gram matrix well conditioned; the
// design's coefficients are R^-1 times the basis's.
#include "tamis/logistic_mixed_model.hpp"

#include <algorithm>
#include <cmath>
#include <functional>
#include <numeric>
#include <string>

#include "relatedness/interval_maximiser.hpp"
#include "relatedness/working_covariance.hpp"
#include "tamis/distributions.hpp"
#include "tamis/errors.hpp"
#include "tamis/mixed_model.hpp"

namespace tamis {
namespace {

constexpr double kLogTwoPi = 1.8378770664093454836;
// tau is searched as h = tau / (1 + tau) on [0, kLargestH]: tau up to 999,
// far beyond any variance of a liability on the logit scale (pi^2 / 3 for
// the residual), where the conditional modes of families with no case run
// off towards -infinity.
constexpr double kLargestH = 1.0 - 1e-3;
constexpr double kHTolerance = 1e-10;
// A floor on w = mu (1 - mu) (|eta| near 28): keeps W^-1 and the working
// response finite where a conditional mode runs far out.
constexpr double kSmallestWeight = 1e-12;
// The conditional mode of b and the Laplace fits over beta stop when their
// steps fall below these.
constexpr double kModeTolerance = 1e-10;
constexpr double kBetaTolerance = 1e-7;
constexpr int kModeSteps = 100;
constexpr int kBetaSteps = 50;
constexpr int kHalvings = 30;
constexpr int kWalkSteps = 6;
constexpr int kParabolaSteps = 30;
// The Laplace likelihood is flat near its maximum in tau: this settles it
// far below the precision any LR needs.
constexpr double kTauTolerance = 1e-6;

double tau_of(double h) { return h / (1.0 - h); }

// log(1 + e^x) without overflow.
double log_one_plus_exp(double x) { return std::max(x, 0.0) + std::log1p(std::exp(-std::abs(x))); }

double bernoulli_log_likelihood(const Eigen::VectorXd& y, const Eigen::VectorXd& eta) {
  double total = 0.0;
  for (Eigen::Index idx = 0; idx < y.size(); ++idx) total += y[idx] * eta[idx] - log_one_plus_exp(eta[idx]);
  return total;
}

// The working model at a linear predictor: mu, w = mu (1 - mu), sqrt(w) and
// the working response eta + (y - mu) / w.
struct WorkingPoint {
  Eigen::VectorXd mu, w, root_w, response;
};

WorkingPoint working_point(const Eigen::VectorXd& y, const Eigen::VectorXd& eta) {
  const Eigen::Index n = y.size();
  WorkingPoint point{Eigen::VectorXd(n), Eigen::VectorXd(n), Eigen::VectorXd(n), Eigen::VectorXd(n)};
  for (Eigen::Index idx = 0; idx < n; ++idx) {
    // w from e^-|eta| keeps its precision where mu is near 0 or 1.
    const double e = std::exp(-std::abs(eta[idx]));
    const double mu = eta[idx] >= 0.0 ? 1.0 / (1.0 + e) : e / (1.0 + e);
    const double w = std::max(e / ((1.0 + e) * (1.0 + e)), kSmallestWeight);
    point.mu[idx] = mu;
    point.w[idx] = w;
    point.root_w[idx] = std::sqrt(w);
    point.response[idx] = eta[idx] + (y[idx] - mu) / w;
  }
  return point;
}

// The GLS fit of the working response on the basis at one factored M: the
// Cholesky factor C of the Gram matrix of the whitened [D Q, D yw] (response
// last), so that C(p, p)^2 = yw' P yw and the diagonal before it gives
// log|Q' Sigma^-1 Q|.
struct GlsFit {
  Eigen::MatrixXd cholesky;
  bool ok = false;
  Eigen::VectorXd basis_coefficients() const {
    const Eigen::Index p = cholesky.rows() - 1;
    const Eigen::MatrixXd l11 = cholesky.topLeftCorner(p, p);
    return l11.transpose().triangularView<Eigen::Upper>().solve(cholesky.row(p).head(p).transpose());
  }
};

GlsFit gls_fit(const detail::WorkingCovariance& covariance, const Eigen::MatrixXd& basis,
               const WorkingPoint& point) {
  Eigen::MatrixXd columns(basis.rows(), basis.cols() + 1);
  columns << basis, point.response;
  const Eigen::MatrixXd whitened = covariance.whiten(point.root_w.asDiagonal() * columns);
  Eigen::LLT<Eigen::MatrixXd> llt(whitened.transpose() * whitened);
  GlsFit fit;
  if (llt.info() != Eigen::Success) return fit;
  fit.cholesky = llt.matrixL();
  fit.ok = (fit.cholesky.diagonal().array() > 0.0).all() && fit.cholesky.allFinite();
  return fit;
}

// The restricted log-likelihood of the working model at a factored M (or
// its likelihood, for WorkingVariance::ml):
//   -1/2 [log|Sigma| + log|X' Sigma^-1 X| + yw' P yw + (n - p) log 2 pi],
// with log|Sigma| = log|M| - sum log w and log|X'Sigma^-1 X| from the basis
// plus log|R'R|.
double working_reml(const detail::WorkingCovariance& covariance, const GlsFit& fit, const WorkingPoint& point,
                    double log_det_r_squared, WorkingVariance variance) {
  if (!fit.ok) return -HUGE_VAL;
  const Eigen::Index p = fit.cholesky.rows() - 1, n = point.w.size();
  const double log_det_sigma = covariance.log_determinant() - point.w.array().log().sum();
  const double log_det_information = 2.0 * fit.cholesky.diagonal().head(p).array().log().sum() + log_det_r_squared;
  const double quadratic = fit.cholesky(p, p) * fit.cholesky(p, p);
  // ML: -1/2 [log|Sigma| + yw' P yw + n log 2 pi] (yw' P yw is the GLS residual's quadratic form).
  if (variance == WorkingVariance::ml) return -0.5 * (log_det_sigma + quadratic + static_cast<double>(n) * kLogTwoPi);
  return -0.5 * (log_det_sigma + log_det_information + quadratic + static_cast<double>(n - p) * kLogTwoPi);
}

// b = tau A alpha at a factored M for the working residual r:
// alpha = Sigma^-1 r = D M^-1 D r and b = r - W^-1 alpha (since tau A = Sigma - W^-1).
struct RandomEffects {
  Eigen::VectorXd b, alpha;
  double tau = 0.0;  // the tau that links them
  double penalty() const { return alpha.dot(b); }  // b' (tau A)^-1 b
};

RandomEffects random_effects_for(const detail::WorkingCovariance& covariance, const WorkingPoint& point,
                                 const Eigen::VectorXd& residual, double tau) {
  RandomEffects out;
  out.tau = tau;
  const Eigen::MatrixXd solved = covariance.solve(point.root_w.cwiseProduct(residual));
  out.alpha = point.root_w.cwiseProduct(solved.col(0));
  out.b = residual - out.alpha.cwiseQuotient(point.w);
  return out;
}

// The conditional mode of b given the fixed part of the linear predictor
// and tau, with the Laplace approximation of the marginal log-likelihood
// there; `covariance` is left factored at the mode's weights.
struct Mode {
  RandomEffects effects;
  Eigen::VectorXd eta;
  WorkingPoint point;
  double log_likelihood = -HUGE_VAL;
  int steps = 0;
  bool ok = false;
};

double penalised_log_likelihood(const Eigen::VectorXd& y, const Eigen::VectorXd& offset, const RandomEffects& effects) {
  return bernoulli_log_likelihood(y, offset + effects.b) - 0.5 * effects.penalty();
}

// Newton's method on sum log p(y | offset + b) - b'(tau A)^-1 b / 2 (each
// step the BLUP of the working model), halving steps that lower it.
Mode conditional_mode(detail::WorkingCovariance& covariance, const Eigen::VectorXd& y, const Eigen::VectorXd& offset,
                      double tau, const RandomEffects& start) {
  Mode mode;
  RandomEffects current = start;
  // The same b at another tau: b = tau A alpha fixes alpha's scale.
  if (tau == 0.0 || current.tau == 0.0) {
    current.b.setZero();
    current.alpha.setZero();
  } else {
    current.alpha *= current.tau / tau;
  }
  current.tau = tau;
  double objective = penalised_log_likelihood(y, offset, current);
  for (int step = 0; step < kModeSteps && tau > 0.0; ++step) {
    ++mode.steps;
    const WorkingPoint point = working_point(y, offset + current.b);
    if (!covariance.factor(point.root_w, tau)) return mode;
    RandomEffects next = random_effects_for(covariance, point, point.response - offset, tau);
    double next_objective = penalised_log_likelihood(y, offset, next);
    bool improved = false;
    for (int halving = 0; halving < kHalvings; ++halving) {
      if (next_objective >= objective - 1e-12 * std::abs(objective)) {
        improved = true;
        break;
      }
      next.b = 0.5 * (next.b + current.b);  // b and alpha are linked linearly (b = tau A alpha)
      next.alpha = 0.5 * (next.alpha + current.alpha);
      next_objective = penalised_log_likelihood(y, offset, next);
    }
    if (!improved) break;  // no ascent left: the mode to rounding
    const double change = (next.b - current.b).lpNorm<Eigen::Infinity>();
    current = std::move(next);
    objective = next_objective;
    if (change < kModeTolerance * (1.0 + current.b.lpNorm<Eigen::Infinity>())) break;
  }
  mode.eta = offset + current.b;
  mode.point = working_point(y, mode.eta);
  if (!covariance.factor(mode.point.root_w, tau)) return mode;
  mode.log_likelihood = objective - 0.5 * covariance.log_determinant();
  // A Bernoulli likelihood is at most 1 and M >= I: a positive value is rounding run away.
  mode.ok = std::isfinite(mode.log_likelihood) && mode.log_likelihood <= 0.0;
  mode.effects = std::move(current);
  return mode;
}

// The Laplace fit at one tau, maximised over the basis coefficients gamma
// by scoring steps: the gradient is Q'(y - mu) (b at its mode) less half the
// gradient of log|M|, which moves with W:
//   d log|M| / d eta_i = (1 - (M^-1)_ii)(1 - 2 mu_i),  d eta / d gamma = W^-1 Sigma^-1 Q,
// and the step uses the working information Q' Sigma^-1 Q.
struct LaplaceAtTau {
  Eigen::VectorXd gamma;
  Mode mode;
  Eigen::MatrixXd information;  // Q' Sigma^-1 Q at the fit
  int modes = 0;
  bool converged = false;
};

Eigen::MatrixXd working_information(const detail::WorkingCovariance& covariance, const Eigen::MatrixXd& basis,
                                    const WorkingPoint& point) {
  const Eigen::MatrixXd whitened = covariance.whiten(point.root_w.asDiagonal() * basis);
  return whitened.transpose() * whitened;
}

LaplaceAtTau laplace_at_tau(detail::WorkingCovariance& covariance, const Eigen::VectorXd& y,
                            const Eigen::MatrixXd& basis, double tau, const Eigen::VectorXd& gamma_start,
                            const RandomEffects& effects_start) {
  LaplaceAtTau fit;
  fit.gamma = gamma_start;
  fit.mode = conditional_mode(covariance, y, basis * fit.gamma, tau, effects_start);
  ++fit.modes;
  if (!fit.mode.ok) return fit;
  for (int step = 0; step < kBetaSteps; ++step) {
    const WorkingPoint& point = fit.mode.point;
    const Eigen::ArrayXd tilt = (1.0 - covariance.inverse_diagonal().array()) * (1.0 - 2.0 * point.mu.array());
    const Eigen::VectorXd log_det_direction =
        point.root_w.cwiseProduct(covariance.solve(tilt.matrix().cwiseQuotient(point.root_w)).col(0));
    const Eigen::VectorXd gradient = basis.transpose() * ((y - point.mu) - 0.5 * log_det_direction);
    fit.information = working_information(covariance, basis, point);
    Eigen::VectorXd move = fit.information.ldlt().solve(gradient);
    bool improved = false;
    for (int halving = 0; halving < kHalvings; ++halving, move *= 0.5) {
      const Eigen::VectorXd gamma = fit.gamma + move;
      Mode mode = conditional_mode(covariance, y, basis * gamma, tau, fit.mode.effects);
      ++fit.modes;
      if (mode.ok && mode.log_likelihood >= fit.mode.log_likelihood - 1e-12 * std::abs(fit.mode.log_likelihood)) {
        fit.gamma = gamma;
        fit.mode = std::move(mode);
        improved = true;
        break;
      }
    }
    if (!improved || move.lpNorm<Eigen::Infinity>() < kBetaTolerance * (1.0 + fit.gamma.lpNorm<Eigen::Infinity>())) {
      fit.converged = true;
      break;
    }
  }
  // Leave the covariance factored at the fit's own mode.
  if (!covariance.factor(fit.mode.point.root_w, tau)) fit.mode.ok = false;
  fit.information = working_information(covariance, basis, fit.mode.point);
  return fit;
}

// The local maximum of the Laplace likelihood in tau that tau_start (the
// PQL estimate, or the null fit's) leads to: a walk uphill over
// tau_start x 1.5^k, then a search between the best point's neighbours.
// Local on purpose: with samples that have their own random effect (A_jj with
// no relative), the Laplace likelihood of Bernoulli outcomes climbs again
// towards tau = infinity, where each such effect fits its own outcome (a
// degenerate fit, not an estimate). When the walk finds no interior maximum
// within kWalkSteps steps up, tau stays at tau_start and `held` says so.
struct TauMaximum {
  double tau = 0.0;
  bool held = false;
};

TauMaximum local_tau_maximum(const std::function<double(double)>& at_tau, double tau_start,
                              double tolerance = kTauTolerance) {
  // The walk's points: 0, then tau_start x 1.5^k (k from -kWalkSteps), or
  // 0.01 x 1.5^k from tau = 0.
  const double base = tau_start > 0.0 ? tau_start : 0.01;
  std::vector<double> taus{0.0};
  for (int step = -kWalkSteps; step <= kWalkSteps; ++step) taus.push_back(base * std::pow(1.5, step));
  std::vector<double> values(taus.size(), std::nan(""));
  auto value_at = [&](std::size_t idx) {
    if (std::isnan(values[idx])) values[idx] = at_tau(taus[idx]);
    return values[idx];
  };
  std::size_t best = tau_start > 0.0 ? static_cast<std::size_t>(kWalkSteps + 1) : 0;
  for (;;) {
    if (best + 1 < taus.size() && value_at(best + 1) > value_at(best)) {
      ++best;
    } else if (best > 0 && value_at(best - 1) > value_at(best)) {
      --best;
    } else {
      break;
    }
  }
  if (best + 1 == taus.size()) return {tau_start, true};
  if (best == 0) return {0.0, false};
  // Successive parabolic interpolation inside the bracket x1 < x2 < x3,
  // f(x2) >= f(x1), f(x3) (Brent 1973, ch. 5): the likelihood is smooth and
  // nearly quadratic there, so a few steps settle tau far below any LR's
  // precision.
  double x1 = taus[best - 1], x2 = taus[best], x3 = taus[best + 1];
  double f1 = value_at(best - 1), f2 = value_at(best), f3 = value_at(best + 1);
  for (int step = 0; step < kParabolaSteps; ++step) {
    const double numerator = (x2 - x1) * (x2 - x1) * (f2 - f3) - (x2 - x3) * (x2 - x3) * (f2 - f1);
    const double denominator = (x2 - x1) * (f2 - f3) - (x2 - x3) * (f2 - f1);
    if (!(std::abs(denominator) > 0.0)) break;
    const double next = std::clamp(x2 - 0.5 * numerator / denominator, x1, x3);
    if (std::abs(next - x2) <= tolerance * (1.0 + x2)) break;
    const double f_next = at_tau(next);
    if (f_next > f2) {
      if (next < x2) x3 = x2, f3 = f2; else x1 = x2, f1 = f2;
      x2 = next, f2 = f_next;
    } else if (next < x2) {
      x1 = next, f1 = f_next;
    } else {
      x3 = next, f3 = f_next;
    }
  }
  return {x2, false};
}

// tau on one working model: a search of the whole range [0, 999] at first
// (or from tau = 0), then the local maximum from the last iteration's
// estimate, which moves little from one working model to the next (the
// whole range again should the walk find no maximum).
double working_tau(const std::function<double(double)>& reml_at_tau, double previous_tau) {
  if (previous_tau > 0.0) {
    const TauMaximum local = local_tau_maximum(reml_at_tau, previous_tau, kHTolerance);
    if (!local.held) return local.tau;
  }
  const detail::IntervalMaximum best = detail::maximise_on_interval(
      [&](double h) { return reml_at_tau(tau_of(h)); }, 0.0, kLargestH, kHTolerance);
  return best.at_lower ? 0.0 : tau_of(best.x);
}

// The Laplace fit over tau (on h = tau / (1 + tau)) and beta; each tau
// starts from the last one's fit.
struct LaplaceSearch {
  LaplaceAtTau best;
  double tau = 0.0;
  bool tau_held = false;  // no interior maximum in tau: held at the start
  int modes = 0;
  bool converged = false;
};

LaplaceSearch search_laplace(detail::WorkingCovariance& covariance, const Eigen::VectorXd& y,
                             const Eigen::MatrixXd& basis, double tau_start, const Eigen::VectorXd& gamma_start,
                             const RandomEffects& effects_start, bool hold_tau) {
  LaplaceSearch search;
  Eigen::VectorXd gamma = gamma_start;
  RandomEffects effects = effects_start;
  auto evaluate = [&](double tau) {
    LaplaceAtTau fit = laplace_at_tau(covariance, y, basis, tau, gamma, effects);
    search.modes += fit.modes;
    if (!fit.mode.ok) return -HUGE_VAL;
    gamma = fit.gamma;
    effects = fit.mode.effects;
    return fit.mode.log_likelihood;
  };
  const TauMaximum maximum = hold_tau ? TauMaximum{tau_start, true} : local_tau_maximum(evaluate, tau_start);
  search.tau = maximum.tau;
  search.tau_held = maximum.held;
  search.best = laplace_at_tau(covariance, y, basis, search.tau, gamma, effects);
  search.modes += search.best.modes;
  search.converged = search.best.converged && search.best.mode.ok;
  return search;
}

std::string format_number(double value) {
  char text[64];
  std::snprintf(text, sizeof text, "%.3g", value);
  return text;
}

}  // namespace

struct LogisticMixedModel::State {
  Eigen::Index n = 0, p = 0;
  Eigen::VectorXd y;
  Eigen::MatrixXd design;
  std::vector<std::string> column_names;
  Eigen::MatrixXd basis;     // Q, n x p orthonormal, X = Q R
  Eigen::MatrixXd r_factor;  // R, p x p upper triangular
  double log_det_r_squared = 0.0;
  std::vector<std::vector<std::uint32_t>> components;
  std::shared_ptr<const detail::RelatednessBlocks> blocks;
  detail::WorkingCovariance covariance;  // factored at the fit's tau and weights
  WorkingPoint point;                    // the working model at the fit
  Eigen::VectorXd coefficients;
  RandomEffects effects;
  LaplaceFit null_laplace;
  Eigen::VectorXd null_gamma;            // the null Laplace fit on the basis
  RandomEffects null_effects;

  explicit State(std::shared_ptr<const detail::RelatednessBlocks> shared)
      : blocks(shared), covariance(std::move(shared)) {}
};

LogisticMixedModel::LogisticMixedModel() = default;
LogisticMixedModel::~LogisticMixedModel() = default;
LogisticMixedModel::LogisticMixedModel(LogisticMixedModel&&) noexcept = default;
LogisticMixedModel& LogisticMixedModel::operator=(LogisticMixedModel&&) noexcept = default;

const std::vector<std::vector<std::uint32_t>>& LogisticMixedModel::components() const { return state_->components; }
const Eigen::MatrixXd& LogisticMixedModel::design() const { return state_->design; }
const Eigen::VectorXd& LogisticMixedModel::coefficients() const { return state_->coefficients; }
const Eigen::VectorXd& LogisticMixedModel::random_effects() const { return state_->effects.b; }
const Eigen::VectorXd& LogisticMixedModel::fitted() const { return state_->point.mu; }
const Eigen::VectorXd& LogisticMixedModel::working_response() const { return state_->point.response; }
const Eigen::VectorXd& LogisticMixedModel::working_weights() const { return state_->point.w; }
const LaplaceFit& LogisticMixedModel::null_laplace() const { return state_->null_laplace; }

LogisticMixedModel LogisticMixedModel::fit(const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                                           const SparseRelatedness& relatedness,
                                           const LogisticMixedOptions& options) {
  if (static_cast<std::size_t>(y.size()) != relatedness.sample_count || design.rows() != y.size()) {
    throw Error(ExitCode::internal, "LogisticMixedModel::fit",
                "the trait (" + std::to_string(y.size()) + " values), the design (" +
                    std::to_string(design.rows()) + " rows) and the relatedness matrix (" +
                    std::to_string(relatedness.sample_count) + " samples) do not match");
  }
  // The plain logistic fit drops collinear columns, refuses a constant trait
  // or separation with its own words, and starts the iterations.
  std::vector<std::string> labels;
  for (Eigen::Index col = 0; col < design.cols(); ++col) labels.push_back(std::to_string(col));
  NullModel plain;
  try {
    plain = fit_null_model("", TraitKind::binary, y, design, labels);
  } catch (const Error& error) {
    throw Error(error.code(), "", error.problem(), error.fix());
  }

  const std::vector<std::vector<std::uint32_t>> components = related_components(relatedness);
  LogisticMixedModel model;
  model.state_ = std::make_unique<State>(detail::RelatednessBlocks::from(relatedness, components));
  State& state = *model.state_;
  state.components = components;
  state.n = y.size();
  state.p = plain.design.cols();
  state.y = y;
  state.design = plain.design;
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(state.design);
  state.basis = qr.householderQ() * Eigen::MatrixXd::Identity(state.n, state.p);
  state.r_factor = state.basis.transpose() * state.design;
  state.r_factor.triangularView<Eigen::StrictlyLower>().setZero();
  state.log_det_r_squared = 2.0 * state.r_factor.diagonal().array().abs().log().sum();

  // PQL: at each working model, tau by REML, then beta by GLS and b by BLUP.
  Eigen::VectorXd eta = plain.design * plain.coefficients;
  double tau = 0.0, change = HUGE_VAL;
  PqlSummary& summary = model.pql_;
  for (int iteration = 1; iteration <= options.max_iterations; ++iteration) {
    summary.iterations = iteration;
    const WorkingPoint point = working_point(y, eta);
    auto reml_at_tau = [&](double candidate) {
      if (!state.covariance.factor(point.root_w, candidate)) return -HUGE_VAL;
      return working_reml(state.covariance, gls_fit(state.covariance, state.basis, point), point,
                          state.log_det_r_squared, options.variance);
    };
    const double next_tau = working_tau(reml_at_tau, tau);
    const double best_value = reml_at_tau(next_tau);
    if (!state.covariance.factor(point.root_w, next_tau)) break;
    const GlsFit gls = gls_fit(state.covariance, state.basis, point);
    if (!gls.ok) break;
    const Eigen::VectorXd fixed = state.basis * gls.basis_coefficients();
    const RandomEffects effects = random_effects_for(state.covariance, point, point.response - fixed, next_tau);
    const Eigen::VectorXd next_eta = fixed + effects.b;
    change = (next_eta - eta).lpNorm<Eigen::Infinity>();
    const double tau_change = std::abs(next_tau - tau);
    eta = next_eta;
    tau = next_tau;
    summary.reml_log_likelihood = best_value;
    if (change < options.tolerance && tau_change <= options.tolerance * std::max(1.0, tau)) {
      summary.converged = true;
      break;
    }
  }
  summary.tau = tau;
  summary.tau_at_zero = tau == 0.0;
  summary.last_change = change;
  if (!summary.converged) {
    throw Error(ExitCode::model, "",
                "the logistic mixed model (penalised quasi-likelihood) did not converge in " +
                    std::to_string(summary.iterations) + " iterations: the linear predictor still moved by " +
                    format_number(change) + " (tau " + format_number(tau) + ")",
                "use fewer covariates, or a higher --keep-above in `tamis relatedness` so that the matrix "
                "holds only close relatives");
  }

  // The working model at the converged linear predictor: the score test's
  // whitening and the saddlepoint's conditional model.
  state.point = working_point(y, eta);
  if (!state.covariance.factor(state.point.root_w, tau)) {
    throw Error(ExitCode::internal, "LogisticMixedModel::fit", "M is not positive definite at the fitted tau");
  }
  const GlsFit gls = gls_fit(state.covariance, state.basis, state.point);
  const Eigen::VectorXd gamma = gls.basis_coefficients();
  state.coefficients = state.r_factor.triangularView<Eigen::Upper>().solve(gamma);
  state.effects = random_effects_for(state.covariance, state.point, state.point.response - state.basis * gamma, tau);

  // The Laplace fit of the null model, from the PQL estimates.
  detail::WorkingCovariance laplace_covariance(state.blocks);
  const LaplaceSearch search =
      search_laplace(laplace_covariance, y, state.basis, tau, gamma, state.effects, /*hold_tau=*/false);
  state.null_gamma = search.best.gamma;
  state.null_effects = search.best.mode.effects;
  state.null_laplace.tau = search.tau;
  state.null_laplace.coefficients = state.r_factor.triangularView<Eigen::Upper>().solve(search.best.gamma);
  state.null_laplace.log_likelihood = search.best.mode.log_likelihood;
  state.null_laplace.evaluations = search.modes;
  state.null_laplace.converged = search.converged;
  state.null_laplace.tau_held = search.tau_held;
  return model;
}

NullModel LogisticMixedModel::conditional_model() const {
  const State& state = *state_;
  NullModel out;
  out.kind = TraitKind::binary;
  out.design = state.design;
  for (Eigen::Index col = 0; col < state.p; ++col) out.column_names.push_back(std::to_string(col));
  out.y = state.y;
  out.coefficients = state.coefficients;
  out.fitted = state.point.mu;
  out.residuals = state.y - state.point.mu;
  out.weights = state.point.w;
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(state.point.root_w.asDiagonal() * state.design);
  out.basis = qr.householderQ() * Eigen::MatrixXd::Identity(state.n, state.p);
  out.sigma2 = 1.0;
  out.iterations = pql_.iterations;
  return out;
}

Eigen::VectorXd LogisticMixedModel::whiten(const Eigen::VectorXd& values) const {
  return state_->covariance.whiten(state_->point.root_w.cwiseProduct(values)).col(0);
}

Eigen::MatrixXd LogisticMixedModel::whiten(const Eigen::MatrixXd& values) const {
  return state_->covariance.whiten(state_->point.root_w.asDiagonal() * values);
}

void LogisticMixedModel::whiten_block(double* genotypes, std::size_t width,
                                      const std::vector<std::size_t>& row_of_sample) const {
  const State& state = *state_;
  if (row_of_sample.size() != static_cast<std::size_t>(state.n)) {
    throw Error(ExitCode::internal, "LogisticMixedModel::whiten_block",
                "row_of_sample names " + std::to_string(row_of_sample.size()) + " samples, the model has " +
                    std::to_string(state.n));
  }
  for (Eigen::Index sample = 0; sample < state.n; ++sample) {
    double* row = genotypes + row_of_sample[static_cast<std::size_t>(sample)] * width;
    const double scale = state.point.root_w[sample];
    for (std::size_t col = 0; col < width; ++col) row[col] *= scale;
  }
  state.covariance.whiten_block(genotypes, width, row_of_sample);
}

LaplaceFit LogisticMixedModel::laplace_fit_with(const Eigen::VectorXd& genotype) const {
  return confirm_fit(genotype).fit;
}

ConfirmResult LogisticMixedModel::confirm(const Eigen::VectorXd& genotype) const {
  return confirm_fit(genotype).result;
}

LogisticMixedModel::Confirmed LogisticMixedModel::confirm_fit(const Eigen::VectorXd& genotype) const {
  const State& state = *state_;
  if (genotype.size() != state.n) {
    throw Error(ExitCode::internal, "LogisticMixedModel::confirm",
                "the genotype has " + std::to_string(genotype.size()) + " values, the model " +
                    std::to_string(state.n));
  }
  Confirmed out;
  // [Q, q_g] is an orthonormal basis of [X, g]; g's coefficient is q_g's
  // divided by |g adjusted| (the last diagonal element of [X, g]'s R).
  Eigen::VectorXd adjusted = genotype - state.basis * (state.basis.transpose() * genotype);
  adjusted -= state.basis * (state.basis.transpose() * adjusted);
  const double adjusted_norm = adjusted.norm();
  if (!(adjusted_norm > 1e-9 * genotype.norm())) {
    out.result.converged = false;
    return out;
  }
  Eigen::MatrixXd basis(state.n, state.p + 1);
  basis << state.basis, adjusted / adjusted_norm;
  Eigen::VectorXd gamma_start(state.p + 1);
  gamma_start << state.null_gamma, 0.0;
  detail::WorkingCovariance covariance(state.blocks);
  const LaplaceSearch search =
      search_laplace(covariance, state.y, basis, state.null_laplace.tau, gamma_start, state.null_effects,
                     /*hold_tau=*/state.null_laplace.tau_held);
  // Where the null fit's tau is held (no maximum near the PQL estimate), the
  // full model's is held at the same value: an LR at fixed tau. The null
  // fit is the full model with the variant's coefficient at 0, so the full
  // maximum is at least the null's: LR >= 0.
  const double lr = std::max(0.0, 2.0 * (search.best.mode.log_likelihood - state.null_laplace.log_likelihood));
  const Eigen::Index last = state.p;
  const double variance = search.best.information.inverse()(last, last);
  ConfirmResult& result = out.result;
  result.beta = search.best.gamma[last] / adjusted_norm;
  result.se = std::sqrt(variance) / adjusted_norm;
  result.wald_chisq = (result.beta / result.se) * (result.beta / result.se);
  result.wald_log_p = log_chisq1_upper_tail(result.wald_chisq);
  result.lrt_chisq = lr;
  result.lrt_log_p = log_chisq1_upper_tail(lr);
  result.iterations = search.modes;
  result.converged = search.converged && std::isfinite(result.beta) && std::isfinite(result.se);

  out.fit.tau = search.tau;
  Eigen::MatrixXd r_full = Eigen::MatrixXd::Zero(state.p + 1, state.p + 1);
  r_full.topLeftCorner(state.p, state.p) = state.r_factor;
  r_full.col(last).head(state.p) = state.basis.transpose() * genotype;
  r_full(last, last) = adjusted_norm;
  out.fit.coefficients = r_full.triangularView<Eigen::Upper>().solve(search.best.gamma);
  out.fit.log_likelihood = search.best.mode.log_likelihood;
  out.fit.evaluations = search.modes;
  out.fit.converged = result.converged;
  out.fit.tau_held = search.tau_held;
  return out;
}

}  // namespace tamis
