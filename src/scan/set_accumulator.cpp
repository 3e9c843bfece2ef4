#include "scan/set_accumulator.hpp"

#include <tbb/task_arena.h>
#include <tbb/task_group.h>

#include <algorithm>
#include <cstring>
#include <type_traits>
#include <cmath>
#include <limits>
#include <tuple>

#include "scan/trait_pass.hpp"
#include "tamis/distributions.hpp"
#include "tamis/errors.hpp"
#include "tamis/saddlepoint.hpp"
#include "tamis/set_tests.hpp"

namespace tamis {
namespace {

// One column of the set tests: a variant, or the sum of the set's
// ultra-rare variants. Every unit counts minor alleles: a variant's column
// is read where the scan keeps it and its sign applied as it is read.
struct TestUnit {
  double u = 0.0;  // signed
  double sign = 1.0;
  std::vector<double> projections;  // signed
  const SparseColumn* column = nullptr;
  const SparseColumn* dosages = nullptr;  // null when the column is the dosages themselves
  // A collapsed unit's own signed sums, which `column` and `dosages` point to.
  std::shared_ptr<SparseColumn> summed_column, summed_dosages;
  double weight = 1.0;
  double minor_allele_frequency = 0.0;
  double log_p = 0.0;  // single-variant p; NaN for a collapsed unit until computed
};

// a + factor b over the union of their samples (both sorted); dense over
// `count` samples where either is.
SparseColumn add_columns(const SparseColumn& a, const SparseColumn& b, double factor, std::size_t count) {
  SparseColumn sum;
  if (a.dense() || b.dense()) {
    sum.values.assign(count, 0.0);
    auto add = [&](const SparseColumn& column, double scale) {
      for (std::size_t entry = 0; entry < column.values.size(); ++entry) {
        sum.values[column.dense() ? entry : column.samples[entry]] += scale * column.values[entry];
      }
    };
    add(a, 1.0);
    add(b, factor);
    return sum;
  }
  std::size_t at_a = 0, at_b = 0;
  while (at_a < a.samples.size() || at_b < b.samples.size()) {
    const bool take_a = at_b == b.samples.size() || (at_a < a.samples.size() && a.samples[at_a] <= b.samples[at_b]);
    const bool take_b = at_a == a.samples.size() || (at_b < b.samples.size() && b.samples[at_b] <= a.samples[at_a]);
    double value = 0.0;
    std::uint32_t sample = 0;
    if (take_a) {
      sample = a.samples[at_a];
      value += a.values[at_a++];
    }
    if (take_b) {
      sample = b.samples[at_b];
      value += factor * b.values[at_b++];
    }
    sum.samples.push_back(sample);
    sum.values.push_back(value);
  }
  return sum;
}

double weight_of(const SetScanOptions& options, double minor_allele_frequency, double listed_weight) {
  switch (options.weighting) {
    case SetWeighting::beta: return beta_density_weight(std::max(minor_allele_frequency, 1e-12));
    case SetWeighting::flat: return 1.0;
    case SetWeighting::listed: return std::isnan(listed_weight) ? 1.0 : listed_weight;
  }
  return 1.0;
}

TestUnit unit_of(const SetScanOptions& options, const SetVariant& variant, double listed_weight) {
  TestUnit unit;
  unit.u = variant.sign * variant.u;
  unit.sign = variant.sign;
  unit.projections = variant.projections;
  for (double& value : unit.projections) value *= variant.sign;
  unit.column = &variant.column;
  if (!variant.dosages.empty()) unit.dosages = &variant.dosages;
  unit.minor_allele_frequency = variant.minor_allele_frequency;
  unit.weight = weight_of(options, variant.minor_allele_frequency, listed_weight);
  unit.log_p = variant.log_p;
  return unit;
}

// The ultra-rare units summed into one, whose frequency is their combined
// one (the weight of a listed set: their mean weight).
TestUnit collapse_units(const SetScanOptions& options, const std::vector<TestUnit>& units,
                        const std::vector<double>& listed, std::size_t sample_count) {
  TestUnit sum;
  sum.projections.assign(units.front().projections.size(), 0.0);
  sum.summed_column = std::make_shared<SparseColumn>();
  const bool any_dosages =
      std::any_of(units.begin(), units.end(), [](const TestUnit& unit) { return unit.dosages != nullptr; });
  if (any_dosages) sum.summed_dosages = std::make_shared<SparseColumn>();
  double listed_total = 0.0;
  for (std::size_t unit_idx = 0; unit_idx < units.size(); ++unit_idx) {
    const TestUnit& unit = units[unit_idx];
    sum.u += unit.u;
    for (std::size_t column_idx = 0; column_idx < unit.projections.size(); ++column_idx) {
      sum.projections[column_idx] += unit.projections[column_idx];
    }
    *sum.summed_column = add_columns(*sum.summed_column, *unit.column, unit.sign, sample_count);
    if (unit.dosages) {
      *sum.summed_dosages = add_columns(*sum.summed_dosages, *unit.dosages, unit.sign, sample_count);
    }
    sum.minor_allele_frequency += unit.minor_allele_frequency;
    listed_total += std::isnan(listed[unit_idx]) ? 1.0 : listed[unit_idx];
  }
  sum.column = sum.summed_column.get();
  sum.dosages = sum.summed_dosages.get();
  sum.minor_allele_frequency = std::min(sum.minor_allele_frequency, 0.5);
  sum.weight = weight_of(options, sum.minor_allele_frequency, listed_total / static_cast<double>(units.size()));
  sum.log_p = std::numeric_limits<double>::quiet_NaN();
  return sum;
}

// Sum over a column's entries of spread[sample] * value: a plain dot
// product over the samples where the column is dense.
double dot_with_spread(const std::vector<double>& spread, const SparseColumn& column) {
  double sum = 0.0;
  if (column.dense()) {
    for (std::size_t sample = 0; sample < column.values.size(); ++sample) sum += spread[sample] * column.values[sample];
    return sum;
  }
  for (std::size_t entry = 0; entry < column.samples.size(); ++entry) sum += spread[column.samples[entry]] * column.values[entry];
  return sum;
}

// X'WX of the units' (signed) columns, column by column: one column spread
// over the samples, the others read against it, so that sparse columns cost
// the units times their entries, not the samples.
Eigen::MatrixXd weighted_cross_products(const std::vector<TestUnit>& units, const Eigen::VectorXd& weights) {
  const Eigen::Index unit_count = static_cast<Eigen::Index>(units.size());
  Eigen::MatrixXd cross(unit_count, unit_count);
  // Kept per thread and left all zero after each set.
  thread_local std::vector<double> spread;
  spread.resize(std::max(spread.size(), static_cast<std::size_t>(weights.size())), 0.0);
  for (Eigen::Index first = 0; first < unit_count; ++first) {
    const TestUnit& unit = units[static_cast<std::size_t>(first)];
    const SparseColumn& column = *unit.column;
    for (std::size_t entry = 0; entry < column.values.size(); ++entry) {
      const std::size_t sample = column.dense() ? entry : column.samples[entry];
      spread[sample] = weights[static_cast<Eigen::Index>(sample)] * column.values[entry];
    }
    for (Eigen::Index second = first; second < unit_count; ++second) {
      const TestUnit& other = units[static_cast<std::size_t>(second)];
      cross(first, second) = cross(second, first) = unit.sign * other.sign * dot_with_spread(spread, *other.column);
    }
    if (column.dense()) {
      std::fill(spread.begin(), spread.begin() + static_cast<std::ptrdiff_t>(column.values.size()), 0.0);
    } else {
      for (const std::uint32_t sample : column.samples) spread[sample] = 0.0;
    }
  }
  return cross;
}

// The score covariance of the units: scale (X'WX - P'P), X the columns and P
// their projections on the kernel's basis; the same sums the kernel takes
// for each variant's own variance.
Eigen::MatrixXd score_covariance(const TraitContext& trait, const std::vector<TestUnit>& units) {
  const Eigen::Index unit_count = static_cast<Eigen::Index>(units.size());
  const Eigen::Index basis_columns = static_cast<Eigen::Index>(units.front().projections.size());
  Eigen::MatrixXd projections(basis_columns, unit_count);
  for (Eigen::Index unit_idx = 0; unit_idx < unit_count; ++unit_idx) {
    const std::vector<double>& unit_projections = units[static_cast<std::size_t>(unit_idx)].projections;
    projections.col(unit_idx) = Eigen::Map<const Eigen::VectorXd>(unit_projections.data(), basis_columns);
  }
  const Eigen::MatrixXd covariance =
      weighted_cross_products(units, trait.model.weights) - projections.transpose() * projections;
  const double scale = trait.model.kind == TraitKind::quantitative ? trait.model.sigma2 : 1.0;
  return scale * covariance;
}

// ln p of a score by the saddlepoint, as a single variant's (the normal
// tail is kept below two standard errors).
double saddlepoint_log_p(const TraitContext& trait, const Eigen::VectorXd& dosages, double u, double variance) {
  constexpr double kNormalCutoff = 2.0;
  const double chisq = u * u / variance;
  if (chisq < kNormalCutoff * kNormalCutoff) return log_chisq1_upper_tail(chisq);
  ScoreResult score;
  score.u = u;
  score.v = variance;
  const double matched = trait.tests->saddlepoint_variance(*trait.saddlepoint, dosages, score);
  if (!(matched > 0.0)) return log_chisq1_upper_tail(chisq);
  return saddlepoint_score_log_p(*trait.saddlepoint, dosages, u * std::sqrt(matched / variance), matched,
                                 kNormalCutoff)
      .log_p;
}

Eigen::VectorXd unit_dosages(const TraitContext& trait, const TestUnit& unit, double factor) {
  Eigen::VectorXd dosages = Eigen::VectorXd::Zero(trait.model.sample_count());
  const SparseColumn& column = unit.dosages ? *unit.dosages : *unit.column;
  const double signed_factor = unit.sign * factor;
  for (std::size_t entry = 0; entry < column.values.size(); ++entry) {
    const std::size_t sample = column.dense() ? entry : column.samples[entry];
    dosages[static_cast<Eigen::Index>(sample)] += signed_factor * column.values[entry];
  }
  return dosages;
}

// The variance a saddlepoint p-value implies for a score u: the one under
// which the normal test gives the same p.
double implied_variance(double u, double log_p) {
  const double quantile = chisq1_quantile_of_log_p(log_p);
  return quantile > 0.0 ? u * u / quantile : 0.0;
}

// Binary traits: the scores' covariance matched to the saddlepoint (Zhao et
// al. 2020, AJHG 106:3-12, from memory): each score whose normal test the
// saddlepoint replaced gets the variance its saddlepoint p implies, its
// covariances scaled alike, and the whole matrix is then scaled so that the
// burden's variance is the one its own saddlepoint p implies. Rare variants
// in unbalanced case-control samples have skewed scores, and without this
// the variance-component and optimal tests run anti-conservative. Returns
// the burden's ln p. Without `widen` the covariance stands and only the
// collapsed units' and the burden's saddlepoint p-values are taken.
double match_covariance_to_saddlepoint(const TraitContext& trait, std::vector<TestUnit>& units,
                                       const Eigen::VectorXd& u, const Eigen::VectorXd& weights,
                                       Eigen::MatrixXd& covariance, bool widen) {
  const Eigen::Index count = u.size();
  Eigen::VectorXd root_ratio = Eigen::VectorXd::Ones(count);
  for (Eigen::Index unit_idx = 0; unit_idx < count; ++unit_idx) {
    TestUnit& unit = units[static_cast<std::size_t>(unit_idx)];
    const double variance = covariance(unit_idx, unit_idx);
    if (!(variance > 0.0)) continue;
    if (std::isnan(unit.log_p)) unit.log_p = saddlepoint_log_p(trait, unit_dosages(trait, unit, 1.0), u[unit_idx], variance);
    if (!widen || u[unit_idx] * u[unit_idx] / variance < 4.0) continue;  // the normal tail stood
    // Only ever widened: where the saddlepoint finds a score more extreme
    // than the normal tail does (the short side of a skewed score), the
    // score's own variance stands.
    const double implied = implied_variance(u[unit_idx], unit.log_p);
    if (implied > variance) root_ratio[unit_idx] = std::sqrt(implied / variance);
  }
  const double burden = weights.dot(u), burden_variance = weights.dot(covariance * weights);
  if (!(burden_variance > 0.0)) return 0.0;
  Eigen::VectorXd burden_dosages = Eigen::VectorXd::Zero(trait.model.sample_count());
  for (Eigen::Index unit_idx = 0; unit_idx < count; ++unit_idx) {
    burden_dosages += unit_dosages(trait, units[static_cast<std::size_t>(unit_idx)], weights[unit_idx]);
  }
  const double burden_log_p = saddlepoint_log_p(trait, burden_dosages, burden, burden_variance);
  if (!widen) return burden_log_p;
  covariance = root_ratio.asDiagonal() * covariance * root_ratio.asDiagonal();
  // Where the saddlepoint replaced the burden's normal tail, the matrix is
  // scaled so that the burden's variance is the one its p implies; where it
  // did not, the widened scores stand (scaling back to the burden's own
  // variance would undo them).
  if (burden * burden / burden_variance >= 4.0) {
    const double implied = implied_variance(burden, burden_log_p);
    const double adjusted = weights.dot(covariance * weights);
    if (implied > adjusted && adjusted > 0.0) covariance *= implied / adjusted;
  }
  return burden_log_p;
}

// The Cauchy combination of the units' own p-values, weighted as the
// variant-level combination of Liu et al. (2019): w^2 maf (1 - maf).
double combine_unit_p_values(const std::vector<TestUnit>& units, const Eigen::MatrixXd& covariance) {
  std::vector<double> log_p(units.size()), weights(units.size());
  for (std::size_t unit_idx = 0; unit_idx < units.size(); ++unit_idx) {
    const TestUnit& unit = units[unit_idx];
    log_p[unit_idx] = unit.log_p;
    if (std::isnan(unit.log_p)) {
      const double variance = covariance(static_cast<Eigen::Index>(unit_idx), static_cast<Eigen::Index>(unit_idx));
      log_p[unit_idx] = variance > 0.0 ? log_chisq1_upper_tail(unit.u * unit.u / variance) : 0.0;
    }
    const double frequency = unit.minor_allele_frequency;
    weights[unit_idx] = unit.weight * unit.weight * std::max(frequency * (1.0 - frequency), 1e-12);
  }
  return cauchy_combination_log_p(log_p, weights);
}

}  // namespace

SetResultRow test_set_variants(const TraitContext& trait, const SetScanOptions& options, const std::string& name,
                               const std::vector<std::shared_ptr<const SetVariant>>& variants,
                               const std::vector<double>& listed_weights, std::size_t* collapsed) {
  SetResultRow row;
  row.set = name;
  row.chromosome = variants.front()->chromosome;
  row.n_variants = variants.size();
  row.weights = set_weighting_name(options.weighting);
  row.n = trait.set.genotype_index.size();
  if (trait.set.kind == TraitKind::binary) row.n_cases = trait.set.case_count;
  row.burden_test = "score";
  row.top_variant_log_p = 0.0;
  std::vector<TestUnit> units, ultra_rare;
  std::vector<double> ultra_rare_listed;
  for (std::size_t variant_idx = 0; variant_idx < variants.size(); ++variant_idx) {
    const SetVariant& variant = *variants[variant_idx];
    row.total_mac += variant.mac;
    if (row.top_variant.empty() || variant.log_p < row.top_variant_log_p) {
      row.top_variant = variant.variant_id;
      row.top_variant_log_p = variant.log_p;
    }
    TestUnit unit = unit_of(options, variant, listed_weights[variant_idx]);
    if (options.collapse_mac > 0.0 && variant.mac <= options.collapse_mac) {
      ultra_rare.push_back(std::move(unit));
      ultra_rare_listed.push_back(listed_weights[variant_idx]);
    } else {
      units.push_back(std::move(unit));
    }
  }
  if (ultra_rare.size() >= 2) {
    row.n_collapsed = ultra_rare.size();
    units.push_back(collapse_units(options, ultra_rare, ultra_rare_listed, trait.set.genotype_index.size()));
  } else if (!ultra_rare.empty()) {
    units.push_back(std::move(ultra_rare.front()));
  }
  if (collapsed) *collapsed = row.n_collapsed;

  Eigen::MatrixXd covariance = score_covariance(trait, units);
  Eigen::VectorXd u(static_cast<Eigen::Index>(units.size())), weights(static_cast<Eigen::Index>(units.size()));
  for (std::size_t unit_idx = 0; unit_idx < units.size(); ++unit_idx) {
    u[static_cast<Eigen::Index>(unit_idx)] = units[unit_idx].u;
    weights[static_cast<Eigen::Index>(unit_idx)] = units[unit_idx].weight;
  }
  // The burden's statistic and one-step estimate per weighted minor allele,
  // as a single variant's, from the scores' own covariance.
  const double burden = weights.dot(u), burden_variance = weights.dot(covariance * weights);
  const double scale = trait.model.kind == TraitKind::quantitative ? trait.model.sigma2 : 1.0;
  if (burden_variance > 0.0) {
    row.burden_chisq = burden * burden / burden_variance;
    row.burden_beta = burden * scale / burden_variance;
    row.burden_se = scale / std::sqrt(burden_variance);
  }
  double burden_log_p = std::numeric_limits<double>::quiet_NaN();
  if (trait.saddlepoint) {
    row.burden_test = "score_spa";
    // A plain logistic model's scores are sums of independent Bernoulli
    // outcomes: each is moved to the normal deviate of its saddlepoint p and
    // the covariance stands (saddlepoint_calibrated_scores, set_tests.hpp).
    // A mixed model's are its working model's: its covariance is widened.
    const bool plain_model = !trait.mixed && !trait.logistic_mixed;
    burden_log_p = match_covariance_to_saddlepoint(trait, units, u, weights, covariance, !plain_model);
    if (plain_model) {
      std::vector<double> log_p(units.size());
      for (std::size_t unit_idx = 0; unit_idx < units.size(); ++unit_idx) log_p[unit_idx] = units[unit_idx].log_p;
      u = saddlepoint_calibrated_scores(u, covariance.diagonal(), log_p);
    }
  }
  // Screened with the cheap tails; the sets that come out small are tested
  // again exactly, as hits of the single-variant screen are refitted.
  SetTestResult tests = test_variant_set(u, covariance, weights, kOptimalRhoGrid, SetTestPrecision::screening);
  const double exact_below = std::log(options.exact_below);
  if (options.exact_below >= 1.0 || tests.variance_log_p < exact_below || tests.optimal_log_p < exact_below ||
      tests.optimal_min_log_p < exact_below) {
    tests = test_variant_set(u, covariance, weights, kOptimalRhoGrid, SetTestPrecision::exact);
  }
  row.burden_log_p = std::isnan(burden_log_p) ? tests.burden_log_p : burden_log_p;
  row.variance_q = tests.variance_q;
  row.variance_log_p = tests.variance_log_p;
  row.variance_method = mixture_tail_method_name(tests.variance_method);
  row.optimal_rho = tests.optimal_rho;
  row.optimal_min_log_p = tests.optimal_min_log_p;
  row.optimal_log_p = tests.optimal_log_p;
  row.cauchy_log_p = combine_unit_p_values(units, covariance);
  row.overall_log_p =
      cauchy_combination_log_p({row.burden_log_p, row.variance_log_p, row.optimal_log_p, row.cauchy_log_p});
  return row;
}

SetAccumulator::SetAccumulator(const VariantSets& sets, const SetScanOptions& options, const TraitContext& trait)
    : sets_(sets), options_(options), trait_(trait), done_(sets.size(), false),
      tasks_(std::make_unique<tbb::task_group>()) {
  if (options.only_sets.empty()) return;
  // Sets not chosen count as done from the start: their variants are not kept.
  for (std::size_t set_idx = 0; set_idx < sets.size(); ++set_idx) {
    done_[set_idx] = options.only_sets.count(sets.set(set_idx).name) == 0;
  }
}

namespace {

// Whether the stream can pass a set before its chromosome ends: a list
// with ID entries may take a variant anywhere on its chromosome.
bool ends_at_known_position(const VariantSetDefinition& definition) {
  if (definition.end <= 0) return false;
  for (const SetListEntry& entry : definition.entries) {
    if (entry.position == 0) return false;
  }
  return true;
}

}  // namespace

void SetAccumulator::add_block(std::vector<SetVariant>& variants, const std::string& contig_key,
                               std::int64_t position) {
  for (SetVariant& variant : variants) {
    if (variant.contig_key != stream_contig_) close_passed_sets(variant.contig_key, variant.position);
    auto shared = std::make_shared<const SetVariant>(std::move(variant));
    for (const SetMembership& membership : shared->sets) {
      if (done_[membership.set_index]) {
        if (options_.only_sets.empty() || options_.only_sets.count(sets_.set(membership.set_index).name)) {
          ++tally_.split_across_chromosomes;
        }
        continue;
      }
      OpenSet& open = open_[membership.set_index];
      open.variants.push_back(shared);
      open.listed_weights.push_back(membership.weight);
    }
  }
  close_passed_sets(contig_key, position);
}

void SetAccumulator::close_passed_sets(const std::string& contig_key, std::int64_t position) {
  stream_contig_ = contig_key;
  contig_rank_.emplace(contig_key, contig_rank_.size());
  std::vector<std::uint32_t> closing;
  for (const auto& [set_index, open] : open_) {
    const VariantSetDefinition& definition = sets_.set(set_index);
    const bool left_contig = open.variants.front()->contig_key != contig_key;
    if (left_contig || (ends_at_known_position(definition) && position > definition.end)) closing.push_back(set_index);
  }
  test_and_keep(closing);
  release_finished_contig(contig_key);
}

SetAccumulator::~SetAccumulator() {
  // A scan unwinding from an error must not leave tasks reading this object.
  tasks_->cancel();
  tasks_->wait();
}

void SetAccumulator::finish() {
  std::vector<std::uint32_t> closing;
  for (const auto& entry : open_) closing.push_back(entry.first);
  test_and_keep(closing);
  collect_closed_sets();
  release_finished_contig(std::string(1, '\0'));  // no contig has this key: everything goes out
}

// A closed set's test runs as a task of its own, beside the pipeline's
// blocks: the serial writer only hands it over. Its row is collected when
// its chromosome ends (or at a checkpoint), after the tasks are waited for.
void SetAccumulator::test_and_keep(const std::vector<std::uint32_t>& closing) {
  for (const std::uint32_t set_index : closing) {
    auto job = std::make_unique<ClosedSet>();
    job->open = std::move(open_.at(set_index));
    job->row.set_index = set_index;
    job->row.contig_key = job->open.variants.front()->contig_key;
    job->row.contig_rank = contig_rank_.at(job->row.contig_key);
    open_.erase(set_index);
    done_[set_index] = true;
    ClosedSet* task = job.get();
    closed_.push_back(std::move(job));
    if (task->open.variants.size() > options_.max_variants) continue;
    tasks_->run([this, task] { test_closed_set(*task); });
  }
  // Back-pressure: when the tests fall behind the stream, the writer waits
  // for them, so that memory holds a bounded number of closed sets' variants:
  // enough to keep every worker busy, few enough that imputed dosages (dense
  // columns) of sets in flight stay within tens of megabytes.
  const std::size_t most_in_flight = 16 * static_cast<std::size_t>(tbb::this_task_arena::max_concurrency());
  if (closed_.size() > most_in_flight) collect_closed_sets();
}

void SetAccumulator::test_closed_set(ClosedSet& job) const {
  const VariantSetDefinition& definition = sets_.set(job.row.set_index);
  const std::vector<std::shared_ptr<const SetVariant>>& variants = job.open.variants;
  SetResultRow row =
      test_set_variants(trait_, options_, definition.name, variants, job.open.listed_weights, &job.collapsed);
  const std::int64_t first = variants.front()->position, last = variants.back()->position;
  row.start = definition.start > 0 ? std::min(definition.start, first) : first;
  row.end = std::max(definition.end, last);
  job.row.start = row.start;
  job.row.end = row.end;
  append_set_result_row(row, job.row.text);
  job.tested = true;
  job.open = OpenSet{};  // the variants go as soon as the set is tested
}

void SetAccumulator::collect_closed_sets() {
  if (closed_.empty()) return;
  tasks_->wait();
  for (std::unique_ptr<ClosedSet>& job : closed_) {
    if (job->tested) {
      ++tally_.tested;
      tally_.variants_collapsed += job->collapsed;
      pending_.push_back(std::move(job->row));
    } else {
      ++tally_.too_large;
      if (tally_.too_large_names.size() < 5) tally_.too_large_names.push_back(sets_.set(job->row.set_index).name);
    }
  }
  closed_.clear();
}

void SetAccumulator::release_finished_contig(const std::string& contig_key) {
  const bool other_contig_closed = std::any_of(closed_.begin(), closed_.end(), [&](const auto& job) {
    return job->row.contig_key != contig_key;
  });
  if (other_contig_closed) collect_closed_sets();
  auto finished = std::stable_partition(pending_.begin(), pending_.end(),
                                        [&](const PendingSetRow& row) { return row.contig_key == contig_key; });
  if (finished == pending_.end()) return;
  std::sort(finished, pending_.end(), [](const PendingSetRow& a, const PendingSetRow& b) {
    return std::tie(a.contig_rank, a.start, a.end, a.set_index) <
           std::tie(b.contig_rank, b.start, b.end, b.set_index);
  });
  for (auto row = finished; row != pending_.end(); ++row) ready_ += row->text;
  pending_.erase(finished, pending_.end());
}

void SetAccumulator::take_rows(std::string& out) {
  out += ready_;
  ready_.clear();
}

namespace {

// Checkpoint bytes: numbers in the machine's own layout (a checkpoint is
// resumed where it was written), strings and vectors with their lengths.
class StateWriter {
 public:
  explicit StateWriter(std::string& out) : out_(out) {}
  template <typename T>
  void number(T value) {
    static_assert(std::is_arithmetic_v<T>, "numbers only");
    out_.append(reinterpret_cast<const char*>(&value), sizeof value);
  }
  void text(const std::string& value) {
    number<std::uint64_t>(value.size());
    out_ += value;
  }
  template <typename T>
  void numbers(const std::vector<T>& values) {
    number<std::uint64_t>(values.size());
    if (values.empty()) return;  // an empty vector's data() may be null
    out_.append(reinterpret_cast<const char*>(values.data()), values.size() * sizeof(T));
  }

 private:
  std::string& out_;
};

class StateReader {
 public:
  StateReader(const std::string& bytes, std::size_t& offset, const std::string& source)
      : bytes_(bytes), offset_(offset), source_(source) {}
  template <typename T>
  T number() {
    T value;
    std::memcpy(&value, take(sizeof value), sizeof value);
    return value;
  }
  std::string text() {
    const std::uint64_t size = number<std::uint64_t>();
    return std::string(take(size), size);
  }
  template <typename T>
  std::vector<T> numbers() {
    const std::uint64_t count = number<std::uint64_t>();
    if (count > bytes_.size() / sizeof(T)) damaged();
    std::vector<T> values(count);
    if (count > 0) std::memcpy(values.data(), take(count * sizeof(T)), count * sizeof(T));
    return values;
  }

 private:
  const char* take(std::uint64_t size) {
    if (size > bytes_.size() - offset_) damaged();
    const char* at = bytes_.data() + offset_;
    offset_ += size;
    return at;
  }
  [[noreturn]] void damaged() const {
    throw Error(ExitCode::usage, source_, "the checkpoint of the open variant sets is damaged",
                "remove the checkpoint files and run the scan again without --resume");
  }
  const std::string& bytes_;
  std::size_t& offset_;
  const std::string& source_;
};

void save_column(StateWriter& writer, const SparseColumn& column) {
  writer.numbers(column.samples);
  writer.numbers(column.values);
}

SparseColumn restore_column(StateReader& reader) {
  SparseColumn column;
  column.samples = reader.numbers<std::uint32_t>();
  column.values = reader.numbers<double>();
  return column;
}

void save_variant(StateWriter& writer, const SetVariant& variant) {
  writer.text(variant.variant_id);
  writer.text(variant.chromosome);
  writer.text(variant.contig_key);
  writer.number(variant.position);
  for (double value : {variant.minor_allele_frequency, variant.mac, variant.sign, variant.u, variant.log_p}) {
    writer.number(value);
  }
  writer.numbers(variant.projections);
  save_column(writer, variant.column);
  save_column(writer, variant.dosages);
  writer.number<std::uint64_t>(variant.sets.size());
  for (const SetMembership& membership : variant.sets) {
    writer.number(membership.set_index);
    writer.number(membership.weight);
  }
}

SetVariant restore_variant(StateReader& reader) {
  SetVariant variant;
  variant.variant_id = reader.text();
  variant.chromosome = reader.text();
  variant.contig_key = reader.text();
  variant.position = reader.number<std::int64_t>();
  for (double* value : {&variant.minor_allele_frequency, &variant.mac, &variant.sign, &variant.u, &variant.log_p}) {
    *value = reader.number<double>();
  }
  variant.projections = reader.numbers<double>();
  variant.column = restore_column(reader);
  variant.dosages = restore_column(reader);
  variant.sets.resize(reader.number<std::uint64_t>());
  for (SetMembership& membership : variant.sets) {
    membership.set_index = reader.number<std::uint32_t>();
    membership.weight = reader.number<double>();
  }
  return variant;
}

}  // namespace

void SetAccumulator::save(std::string& out) {
  collect_closed_sets();
  StateWriter writer(out);
  writer.text(stream_contig_);
  writer.number<std::uint64_t>(contig_rank_.size());
  for (const auto& [contig, rank] : contig_rank_) {
    writer.text(contig);
    writer.number<std::uint64_t>(rank);
  }
  // A variant shared by overlapping sets is written once, and each set
  // names its variants by their place in that list.
  std::map<const SetVariant*, std::uint64_t> numbering;
  std::vector<const SetVariant*> variants;
  for (const auto& entry : open_) {
    for (const auto& variant : entry.second.variants) {
      if (numbering.emplace(variant.get(), variants.size()).second) variants.push_back(variant.get());
    }
  }
  writer.number<std::uint64_t>(variants.size());
  for (const SetVariant* variant : variants) save_variant(writer, *variant);
  writer.number<std::uint64_t>(open_.size());
  for (const auto& [set_index, open] : open_) {
    writer.number(set_index);
    std::vector<std::uint64_t> members;
    for (const auto& variant : open.variants) members.push_back(numbering.at(variant.get()));
    writer.numbers(members);
    writer.numbers(open.listed_weights);
  }
  std::vector<std::uint8_t> done(done_.begin(), done_.end());
  writer.numbers(done);
  writer.number<std::uint64_t>(pending_.size());
  for (const PendingSetRow& row : pending_) {
    writer.text(row.contig_key);
    writer.number<std::uint64_t>(row.contig_rank);
    writer.number(row.start);
    writer.number(row.end);
    writer.number(row.set_index);
    writer.text(row.text);
  }
  for (std::uint64_t count : {tally_.tested, tally_.too_large, tally_.split_across_chromosomes,
                              tally_.variants_collapsed}) {
    writer.number(count);
  }
  writer.number<std::uint64_t>(tally_.too_large_names.size());
  for (const std::string& name : tally_.too_large_names) writer.text(name);
}

void SetAccumulator::restore(const std::string& bytes, std::size_t& offset, const std::string& source) {
  StateReader reader(bytes, offset, source);
  stream_contig_ = reader.text();
  contig_rank_.clear();
  for (std::uint64_t count = reader.number<std::uint64_t>(); count > 0; --count) {
    std::string contig = reader.text();
    contig_rank_[contig] = reader.number<std::uint64_t>();
  }
  std::vector<std::shared_ptr<const SetVariant>> variants(reader.number<std::uint64_t>());
  for (auto& variant : variants) variant = std::make_shared<const SetVariant>(restore_variant(reader));
  open_.clear();
  for (std::uint64_t count = reader.number<std::uint64_t>(); count > 0; --count) {
    OpenSet& open = open_[reader.number<std::uint32_t>()];
    for (std::uint64_t member : reader.numbers<std::uint64_t>()) open.variants.push_back(variants.at(member));
    open.listed_weights = reader.numbers<double>();
  }
  const std::vector<std::uint8_t> done = reader.numbers<std::uint8_t>();
  done_.assign(done.begin(), done.end());
  pending_.resize(reader.number<std::uint64_t>());
  for (PendingSetRow& row : pending_) {
    row.contig_key = reader.text();
    row.contig_rank = reader.number<std::uint64_t>();
    row.start = reader.number<std::int64_t>();
    row.end = reader.number<std::int64_t>();
    row.set_index = reader.number<std::uint32_t>();
    row.text = reader.text();
  }
  for (std::uint64_t* count : {&tally_.tested, &tally_.too_large, &tally_.split_across_chromosomes,
                               &tally_.variants_collapsed}) {
    *count = reader.number<std::uint64_t>();
  }
  tally_.too_large_names.resize(reader.number<std::uint64_t>());
  for (std::string& name : tally_.too_large_names) name = reader.text();
  if (done_.size() != sets_.size()) {
    throw Error(ExitCode::usage, source, "the checkpoint of the open variant sets is for another set file",
                "run the scan again without --resume");
  }
}

}  // namespace tamis
