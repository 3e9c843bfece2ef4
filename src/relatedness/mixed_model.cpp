// The linear mixed model V = s2 H, H = (1 - h2) I + h2 A: h2 by REML and by
// ML on the profile likelihood (s2 profiled out), GLS through a whitening W
// with W'W = H^-1, and the confirmation refit of one variant by ML.
//
// The design enters through an orthonormal basis Q of its columns (X = QR)
// and y through its OLS residual: both leave every likelihood and GLS
// estimate unchanged (the REML term log|X'H^-1 X| gains the constant
// 2 log|det R|, added back) but keep the small Gram matrices well
// conditioned. At each h2 the likelihood needs only the Gram matrix of the
// whitened columns [WQ, W y_res] and log|H|, which the component factors
// supply.
#include "tamis/mixed_model.hpp"

#include <algorithm>
#include <cmath>
#include <map>
#include <numeric>
#include <sstream>

#include "relatedness/component_factor.hpp"
#include "relatedness/interval_maximiser.hpp"
#include "tamis/distributions.hpp"
#include "tamis/errors.hpp"
#include "tamis/null_model.hpp"

namespace tamis {
namespace {

constexpr double kLogTwoPi = 1.8378770664093454836;  // log(2 pi)
// The optimiser's absolute tolerance on h2 (a relative sqrt(eps) |h2| adds to it).
constexpr double kH2Tolerance = 1e-10;
// A relatedness matrix that admits only h2 below this cannot describe a trait
// with a substantial polygenic component: it is refused, not fitted.
constexpr double kSmallestUsefulH2Bound = 0.5;
// Samples named in an error message about a component.
constexpr std::size_t kSamplesNamed = 5;

// The Cholesky factor L (lower) of the Gram matrix of the whitened columns
// at one h2, and log|H|. With the response last, L(last, last)^2 is the
// whitened residual sum of squares r'r and the diagonal before it gives
// log|Q'H^-1 Q| (Q the regressors in the order given).
struct WhitenedFit {
  bool factored = false;
  double log_det_h = 0.0;
  Eigen::MatrixXd cholesky;

  double rss() const {
    const Eigen::Index last = cholesky.rows() - 1;
    return cholesky(last, last) * cholesky(last, last);
  }
};

double profile_reml(const WhitenedFit& fit, Eigen::Index sample_count, double log_det_r_squared) {
  if (!fit.factored) return -HUGE_VAL;
  const Eigen::Index regressors = fit.cholesky.rows() - 1;
  const double residual_df = static_cast<double>(sample_count - regressors);
  const double log_det_xtx =
      2.0 * fit.cholesky.diagonal().head(regressors).array().log().sum() + log_det_r_squared;
  return -0.5 * (residual_df * std::log(fit.rss() / residual_df) + fit.log_det_h + log_det_xtx +
                 residual_df * (1.0 + kLogTwoPi));
}

double profile_ml(const WhitenedFit& fit, Eigen::Index sample_count) {
  if (!fit.factored) return -HUGE_VAL;
  const double n = static_cast<double>(sample_count);
  return -0.5 * (n * std::log(fit.rss() / n) + fit.log_det_h + n * (1.0 + kLogTwoPi));
}

std::string describe_samples(const std::vector<std::uint32_t>& samples, const MixedModelOptions& options) {
  std::ostringstream text;
  const std::size_t named = std::min(samples.size(), kSamplesNamed);
  for (std::size_t sample_idx = 0; sample_idx < named; ++sample_idx) {
    if (sample_idx > 0) text << ", ";
    const std::uint32_t sample = samples[sample_idx];
    text << (options.sample_label ? options.sample_label(sample) : "#" + std::to_string(sample));
  }
  if (samples.size() > named) text << " and " << samples.size() - named << " more";
  return text.str();
}

void check_inputs(const Eigen::VectorXd& y, const Eigen::MatrixXd& design, const SparseRelatedness& relatedness) {
  const auto n = static_cast<std::size_t>(y.size());
  if (static_cast<std::size_t>(design.rows()) != n || relatedness.sample_count != n ||
      relatedness.diagonal.size() != n) {
    throw Error(ExitCode::internal, "MixedModel::fit",
                "the trait (" + std::to_string(n) + " values), the design (" + std::to_string(design.rows()) +
                    " rows) and the relatedness matrix (" + std::to_string(relatedness.sample_count) +
                    " samples, " + std::to_string(relatedness.diagonal.size()) + " diagonal values) do not match");
  }
  for (double value : relatedness.diagonal) {
    if (!std::isfinite(value)) {
      throw Error(ExitCode::internal, "MixedModel::fit", "a diagonal value of the relatedness matrix is not finite");
    }
  }
  for (const RelatednessPair& pair : relatedness.pairs) {
    if (!(pair.first < pair.second) || pair.second >= n || !std::isfinite(pair.value)) {
      throw Error(ExitCode::internal, "MixedModel::fit",
                  "a relatedness pair (" + std::to_string(pair.first) + ", " + std::to_string(pair.second) +
                      ") is out of order, out of range or not finite");
    }
  }
}

// Each component in its local numbering, with its share of the pairs.
std::vector<detail::RelatedComponent> gather_components(const SparseRelatedness& relatedness,
                                                        const std::vector<std::vector<std::uint32_t>>& components) {
  std::vector<std::int64_t> component_of(relatedness.sample_count, -1);
  std::vector<int> local_of(relatedness.sample_count, 0);
  std::vector<detail::RelatedComponent> gathered(components.size());
  for (std::size_t comp_idx = 0; comp_idx < components.size(); ++comp_idx) {
    detail::RelatedComponent& out = gathered[comp_idx];
    out.samples = components[comp_idx];
    for (std::size_t local = 0; local < out.samples.size(); ++local) {
      component_of[out.samples[local]] = static_cast<std::int64_t>(comp_idx);
      local_of[out.samples[local]] = static_cast<int>(local);
      out.diagonal.push_back(relatedness.diagonal[out.samples[local]]);
    }
  }
  for (const RelatednessPair& pair : relatedness.pairs) {
    // first < second, and a sample's local index grows with its model index.
    gathered[static_cast<std::size_t>(component_of[pair.first])].pairs.emplace_back(
        local_of[pair.second], local_of[pair.first], pair.value);
  }
  return gathered;
}

// The factors of H: first the singletons and the components small enough to
// eigendecompose, then each larger component, reduced to tridiagonal form
// where its sparse Cholesky factor would fill in, sparse otherwise
// (kEigenComponentLimit and the other limits in mixed_model.hpp).
std::vector<std::unique_ptr<detail::CovarianceFactor>> make_factors(
    const SparseRelatedness& relatedness, const std::vector<std::vector<std::uint32_t>>& components,
    const MixedModelOptions& options) {
  std::vector<std::unique_ptr<detail::CovarianceFactor>> factors(1);
  std::vector<detail::RelatedComponent> eigendecomposed;
  for (detail::RelatedComponent& component : gather_components(relatedness, components)) {
    const std::size_t size = component.samples.size();
    if (size <= std::min(options.eigen_component_limit, options.dense_component_limit)) {
      eigendecomposed.push_back(std::move(component));
      continue;
    }
    if (size <= options.dense_component_limit) {
      const detail::SparseFactorShares sparse = detail::sparse_factor_shares(component);
      if (sparse.work >= options.sparse_work_share) {
        const bool whiten_by_sparse_factor = sparse.entries < options.sparse_whitening_entries;
        factors.push_back(detail::make_dense_component(std::move(component), whiten_by_sparse_factor));
        continue;
      }
    }
    factors.push_back(detail::make_sparse_component(std::move(component)));
  }
  std::vector<bool> related(relatedness.sample_count, false);
  for (const auto& component : components)
    for (std::uint32_t sample : component) related[sample] = true;
  std::vector<std::uint32_t> singletons;
  std::vector<double> singleton_diagonal;
  for (std::uint32_t sample = 0; sample < relatedness.sample_count; ++sample) {
    if (related[sample]) continue;
    singletons.push_back(sample);
    singleton_diagonal.push_back(relatedness.diagonal[sample]);
  }
  factors.front() =
      detail::make_eigen_components(std::move(singletons), std::move(singleton_diagonal), std::move(eigendecomposed));
  return factors;
}

}  // namespace

std::vector<std::vector<std::uint32_t>> related_components(const SparseRelatedness& relatedness) {
  std::vector<std::uint32_t> parent(relatedness.sample_count);
  std::iota(parent.begin(), parent.end(), 0u);
  auto root_of = [&parent](std::uint32_t sample) {
    while (parent[sample] != sample) {
      parent[sample] = parent[parent[sample]];  // path halving
      sample = parent[sample];
    }
    return sample;
  };
  for (const RelatednessPair& pair : relatedness.pairs) {
    const std::uint32_t first = root_of(pair.first), second = root_of(pair.second);
    // The smaller index becomes the root, so a component's root is its first sample.
    if (first != second) parent[std::max(first, second)] = std::min(first, second);
  }
  std::vector<std::int64_t> component_of_root(relatedness.sample_count, -1);
  std::vector<std::vector<std::uint32_t>> components;
  std::vector<std::size_t> sizes(relatedness.sample_count, 0);
  for (std::uint32_t sample = 0; sample < relatedness.sample_count; ++sample) ++sizes[root_of(sample)];
  for (std::uint32_t sample = 0; sample < relatedness.sample_count; ++sample) {
    const std::uint32_t root = root_of(sample);
    if (sizes[root] < 2) continue;
    if (component_of_root[root] < 0) {
      component_of_root[root] = static_cast<std::int64_t>(components.size());
      components.emplace_back();
      components.back().reserve(sizes[root]);
    }
    components[static_cast<std::size_t>(component_of_root[root])].push_back(sample);
  }
  return components;
}

// The whitened fits of one set of working columns by h2: the REML and ML
// searches share their grid, and each search's estimate is looked up again
// afterwards, so each h2 is factored once (for a large component, a
// factorisation is most of a fit's cost).
template <typename Evaluate>
class FitsByH2 {
 public:
  explicit FitsByH2(Evaluate evaluate) : evaluate_(std::move(evaluate)) {}
  const WhitenedFit& at(double h2) {
    auto found = fits_.find(h2);
    if (found == fits_.end()) found = fits_.emplace(h2, evaluate_(h2)).first;
    return found->second;
  }

 private:
  Evaluate evaluate_;
  std::map<double, WhitenedFit> fits_;
};

struct MixedModel::State {
  Eigen::Index sample_count = 0;
  Eigen::Index column_count = 0;  // p: the design's independent columns
  std::vector<std::vector<std::uint32_t>> components;
  std::vector<std::unique_ptr<detail::CovarianceFactor>> factors;
  Eigen::MatrixXd basis;          // Q (n x p), orthonormal, spanning the kept design columns
  double log_det_r_squared = 0.0; // log|R'R| = log|X'X| - log|Q'Q|
  Eigen::MatrixXd working;        // [Q, y - X b_ols] in the factors' working rows, stacked
  double h2_max = 0.0;
  Eigen::VectorXd coefficients;
  Eigen::VectorXd standard_errors;

  // The working rows of `columns` (one row per model sample), factor by factor.
  Eigen::MatrixXd to_working_rows(const Eigen::MatrixXd& columns) const {
    Eigen::Index rows = 0;
    for (const auto& factor : factors) rows += factor->row_count();
    Eigen::MatrixXd out(rows, columns.cols());
    Eigen::Index offset = 0;
    for (const auto& factor : factors) {
      out.middleRows(offset, factor->row_count()) = factor->to_working_rows(columns);
      offset += factor->row_count();
    }
    return out;
  }

  WhitenedFit whitened_fit(const Eigen::MatrixXd& columns_in_working_rows, double h2) const {
    WhitenedFit fit;
    Eigen::MatrixXd gram = Eigen::MatrixXd::Zero(columns_in_working_rows.cols(), columns_in_working_rows.cols());
    Eigen::Index offset = 0;
    for (const auto& factor : factors) {
      fit.log_det_h +=
          factor->add_whitened_gram(h2, columns_in_working_rows.middleRows(offset, factor->row_count()), gram);
      offset += factor->row_count();
    }
    if (!std::isfinite(fit.log_det_h)) return fit;
    Eigen::LLT<Eigen::MatrixXd> cholesky(gram);
    if (cholesky.info() != Eigen::Success) return fit;
    fit.cholesky = cholesky.matrixL();
    fit.factored = (fit.cholesky.diagonal().array() > 0.0).all();
    return fit;
  }
};

MixedModel::MixedModel() = default;
MixedModel::~MixedModel() = default;
MixedModel::MixedModel(MixedModel&&) noexcept = default;
MixedModel& MixedModel::operator=(MixedModel&&) noexcept = default;

const std::vector<std::vector<std::uint32_t>>& MixedModel::components() const { return state_->components; }
const Eigen::VectorXd& MixedModel::coefficients() const { return state_->coefficients; }
const Eigen::VectorXd& MixedModel::standard_errors() const { return state_->standard_errors; }

MixedModel MixedModel::fit(const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                           const SparseRelatedness& relatedness) {
  return fit(y, design, relatedness, MixedModelOptions());
}

MixedModel MixedModel::fit(const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                           const SparseRelatedness& relatedness, const MixedModelOptions& options) {
  check_inputs(y, design, relatedness);
  // The OLS fit drops collinear columns and refuses a constant trait or a
  // fit without residual degrees of freedom, with the plain model's words.
  std::vector<std::string> column_labels;
  for (Eigen::Index col = 0; col < design.cols(); ++col) column_labels.push_back(std::to_string(col));
  NullModel ols;
  try {
    ols = fit_null_model("", TraitKind::quantitative, y, design, column_labels);
  } catch (const Error& error) {
    throw Error(error.code(), "", error.problem(), error.fix());
  }

  MixedModel model;
  model.state_ = std::make_unique<State>();
  State& state = *model.state_;
  state.sample_count = y.size();
  state.column_count = ols.design.cols();
  state.basis = ols.basis;
  const Eigen::MatrixXd r_factor = (ols.basis.transpose() * ols.design).triangularView<Eigen::Upper>();
  state.log_det_r_squared = 2.0 * r_factor.diagonal().array().abs().log().sum();

  state.components = related_components(relatedness);
  state.factors = make_factors(relatedness, state.components, options);

  const detail::AdmissibleRange* limiting = &state.factors.front()->admissible_range();
  for (const auto& factor : state.factors) {
    if (factor->admissible_range().h2_max < limiting->h2_max) limiting = &factor->admissible_range();
  }
  state.h2_max = limiting->h2_max;
  if (state.h2_max < kSmallestUsefulH2Bound) {
    std::ostringstream problem;
    problem << "V = s2_e I + s2_g A can be factored only for h2 below " << state.h2_max
            << ": the relatedness among the " << limiting->limiting_samples.size() << " related samples "
            << describe_samples(limiting->limiting_samples, options)
            << " has a negative eigenvalue (" << limiting->smallest_eigenvalue_of_a
            << "), which no covariance matrix has";
    throw Error(ExitCode::model, "", problem.str(),
                "raise --keep-above so that weak, noisy pairs leave the matrix, or check these samples' "
                "entries (pairs that contradict each other, such as two samples each closely related to a "
                "third but unrelated to each other)");
  }

  Eigen::MatrixXd columns(state.sample_count, state.column_count + 1);
  columns << ols.basis, ols.residuals;
  state.working = state.to_working_rows(columns);

  FitsByH2 fits([&state](double h2) { return state.whitened_fit(state.working, h2); });
  auto fit_by = [&](auto objective, VarianceComponents& out, Eigen::Index residual_df) {
    const detail::IntervalMaximum best = detail::maximise_on_interval(
        [&](double h2) { return objective(fits.at(h2)); }, 0.0, state.h2_max, kH2Tolerance);
    const double s2 = fits.at(best.x).rss() / static_cast<double>(residual_df);
    out.h2 = best.x;
    out.sigma2_g = best.x * s2;
    out.sigma2_e = (1.0 - best.x) * s2;
    out.log_likelihood = best.value;
    out.iterations = best.evaluations;
    out.at_boundary = best.at_lower || best.at_upper;
  };
  const Eigen::Index n = state.sample_count, p = state.column_count;
  fit_by([&](const WhitenedFit& fit) { return profile_reml(fit, n, state.log_det_r_squared); }, model.reml_, n - p);
  fit_by([&](const WhitenedFit& fit) { return profile_ml(fit, n); }, model.null_ml_, n);

  // GLS at the REML h2: with L11 the regressors' block of the Cholesky
  // factor and l the response's row, beta_Q = L11^-T l and
  // Cov(beta_Q) = s2 (L11 L11')^-1; back to the design by beta = R^-1 beta_Q.
  const WhitenedFit& at_reml = fits.at(model.reml_.h2);
  const Eigen::MatrixXd l11 = at_reml.cholesky.topLeftCorner(p, p);
  const Eigen::VectorXd response_row = at_reml.cholesky.row(p).head(p).transpose();
  const Eigen::MatrixXd l11_inverse_t =
      l11.transpose().triangularView<Eigen::Upper>().solve(Eigen::MatrixXd::Identity(p, p));
  const Eigen::MatrixXd to_design = r_factor.triangularView<Eigen::Upper>().solve(l11_inverse_t);
  const double s2_reml = at_reml.rss() / static_cast<double>(n - p);
  state.coefficients = ols.coefficients + to_design * response_row;
  state.standard_errors = std::sqrt(s2_reml) * to_design.rowwise().norm();

  for (auto& factor : state.factors) factor->set_whitening(model.reml_.h2);
  return model;
}

Eigen::VectorXd MixedModel::whiten(const Eigen::VectorXd& values) const {
  Eigen::VectorXd out = values;
  std::vector<std::size_t> identity(static_cast<std::size_t>(values.size()));
  std::iota(identity.begin(), identity.end(), std::size_t{0});
  whiten_block(out.data(), 1, identity);
  return out;
}

Eigen::MatrixXd MixedModel::whiten(const Eigen::MatrixXd& values) const {
  Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> rows = values;
  std::vector<std::size_t> identity(static_cast<std::size_t>(values.rows()));
  std::iota(identity.begin(), identity.end(), std::size_t{0});
  whiten_block(rows.data(), static_cast<std::size_t>(values.cols()), identity);
  return rows;
}

void MixedModel::whiten_block(double* genotypes, std::size_t width,
                              const std::vector<std::size_t>& row_of_sample) const {
  if (row_of_sample.size() != static_cast<std::size_t>(state_->sample_count)) {
    throw Error(ExitCode::internal, "MixedModel::whiten_block",
                "row_of_sample names " + std::to_string(row_of_sample.size()) + " samples, the model has " +
                    std::to_string(state_->sample_count));
  }
  if (width == 0) return;
  std::vector<double> scratch;
  for (const auto& factor : state_->factors) factor->whiten_block(genotypes, width, row_of_sample, scratch);
}

ConfirmResult MixedModel::confirm(const Eigen::VectorXd& genotype) const {
  const State& state = *state_;
  const Eigen::Index n = state.sample_count, p = state.column_count;
  if (genotype.size() != n) {
    throw Error(ExitCode::internal, "MixedModel::confirm",
                "the genotype has " + std::to_string(genotype.size()) + " values, the model " + std::to_string(n));
  }
  ConfirmResult out;
  // The genotype's part outside the covariate span, as a unit vector q_g:
  // [Q, q_g] is then an orthonormal basis of [X, g], and g's coefficient is
  // q_g's divided by |g_adjusted| (the last diagonal element of [X, g]'s R).
  Eigen::VectorXd adjusted = genotype - state.basis * (state.basis.transpose() * genotype);
  adjusted -= state.basis * (state.basis.transpose() * adjusted);
  const double adjusted_norm = adjusted.norm();
  if (!(adjusted_norm > 1e-9 * genotype.norm())) {
    out.converged = false;  // not estimable: the variant adds nothing to the covariates
    return out;
  }
  Eigen::MatrixXd working(state.working.rows(), p + 2);
  working << state.working.leftCols(p), state.to_working_rows(adjusted / adjusted_norm), state.working.col(p);

  FitsByH2 fits([&state, &working](double h2) { return state.whitened_fit(working, h2); });
  auto full_ml = [&](double h2) { return profile_ml(fits.at(h2), n); };
  detail::IntervalMaximum best = detail::maximise_on_interval(full_ml, 0.0, state.h2_max, kH2Tolerance);
  // Adding a column cannot lower the likelihood at a given h2, so the null
  // fit's h2 is a floor for the full fit: it keeps LR >= 0 exactly.
  const double at_null_h2 = full_ml(null_ml_.h2);
  if (at_null_h2 > best.value) {
    best.x = null_ml_.h2;
    best.value = at_null_h2;
  }
  const WhitenedFit& fit = fits.at(best.x);
  const double l_gg = fit.cholesky(p, p), l_yg = fit.cholesky(p + 1, p), l_yy = fit.cholesky(p + 1, p + 1);
  const double s2_ml = l_yy * l_yy / static_cast<double>(n);
  out.beta = l_yg / (l_gg * adjusted_norm);
  out.se = std::sqrt(s2_ml) / (l_gg * adjusted_norm);
  out.wald_chisq = (out.beta / out.se) * (out.beta / out.se);
  out.wald_log_p = log_chisq1_upper_tail(out.wald_chisq);
  out.lrt_chisq = std::max(0.0, 2.0 * (best.value - null_ml_.log_likelihood));
  out.lrt_log_p = log_chisq1_upper_tail(out.lrt_chisq);
  out.iterations = best.evaluations + 1;
  out.converged = best.converged;
  return out;
}

}  // namespace tamis
