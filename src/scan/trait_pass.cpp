#include "scan/trait_pass.hpp"

#include <algorithm>
#include <cmath>

#include "tamis/distributions.hpp"
#include "tamis/firth.hpp"
#include "tamis/hardy_weinberg.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {
namespace {

// Counts the site's alleles over each sample's ploidy, and its diploid hard
// calls for the Hardy-Weinberg test. A haploid GT dosage scaled to 0/2 still
// counts as one allele.
void count_alleles(const std::vector<std::size_t>& sample_index, const DosageBlock& block, std::size_t site_idx,
                   int haploid_dosage, SiteSummary& summary) {
  const VariantSite& site = block.sites[site_idx];
  if (!site.has_hard_calls) {
    summary.allele_count = summary.sum;
    summary.allele_slots = 2.0 * static_cast<double>(summary.called);
    return;
  }
  const double* dosages = block.site_dosages(site_idx);
  const std::uint8_t* ploidy = block.site_ploidy(site_idx);
  const std::int8_t* calls = block.site_diploid_calls(site_idx);
  const bool scaled_haploid = site.source == DosageField::gt && haploid_dosage == 2;
  for (std::size_t sample : sample_index) {
    if (calls[sample] == 0) ++summary.hom_ref;
    if (calls[sample] == 1) ++summary.het;
    if (calls[sample] == 2) ++summary.hom_alt;
    const double value = dosages[sample];
    if (std::isnan(value)) continue;
    const int copies = ploidy[sample] > 0 ? ploidy[sample] : 2;
    summary.allele_slots += copies;
    summary.allele_count += (copies == 1 && scaled_haploid) ? value / 2.0 : value;
  }
}

}  // namespace

void gather_block(const TraitContext& trait, const DosageBlock& block, GatheredBlock& scratch) {
  const std::vector<std::size_t>& sample_index = trait.set.genotype_index;
  const std::size_t width = block.size();
  const std::size_t samples = sample_index.size();
  scratch.genotypes.resize(samples * width);
  scratch.summaries.assign(width, SiteSummary{});
  for (std::size_t site_idx = 0; site_idx < width; ++site_idx) {
    const double* dosages = block.site_dosages(site_idx);
    SiteSummary& summary = scratch.summaries[site_idx];
    for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
      const double value = dosages[sample_index[sample_idx]];
      if (std::isnan(value)) continue;
      ++summary.called;
      summary.sum += value;
      summary.sum_squares += value * value;
    }
    count_alleles(sample_index, block, site_idx, trait.haploid_dosage, summary);
    const double fill = summary.mean();
    double* out = scratch.genotypes.data() + site_idx;
    for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
      const double value = dosages[sample_index[sample_idx]];
      out[sample_idx * width] = std::isnan(value) ? fill : value;
    }
  }
}

namespace {

void copy_column(const GatheredBlock& scratch, std::size_t width, std::size_t site_idx,
                 Eigen::VectorXd& column) {
  const std::size_t samples = scratch.genotypes.size() / width;
  column.resize(static_cast<Eigen::Index>(samples));
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    column[static_cast<Eigen::Index>(sample_idx)] = scratch.genotypes[sample_idx * width + site_idx];
  }
}

std::string make_variant_id(const VariantSite& site, const std::string& chromosome) {
  return chromosome + "_" + std::to_string(site.position) + "_" + site.ref + "_" + site.alt;
}

bool is_selected(const VariantSelection& selection, const std::string& trait, const VariantSite& site,
                 const std::string& chromosome) {
  if (selection.record_ids.count(site.id)) return true;
  const std::string variant_id = make_variant_id(site, chromosome);
  if (selection.variant_ids.count(variant_id)) return true;
  auto for_trait = selection.trait_variant_ids.find(trait);
  return for_trait != selection.trait_variant_ids.end() && for_trait->second.count(variant_id) > 0;
}

bool looks_like_rsid(const std::string& id) {
  if (id.size() < 3 || id[0] != 'r' || id[1] != 's') return false;
  return std::all_of(id.begin() + 2, id.end(), [](char c) { return c >= '0' && c <= '9'; });
}

double variance_of(const SiteSummary& summary) {
  const double mean = summary.mean();
  return std::max(0.0, summary.sum_squares / static_cast<double>(summary.called) - mean * mean);
}

void fill_site_columns(const TraitContext& trait, const VariantSite& site,
                       const std::string& chromosome, const SiteSummary& summary,
                       ResultRow& row) {
  const double allele_frequency = summary.allele_slots > 0 ? summary.allele_count / summary.allele_slots : 0.0;
  row.chromosome = chromosome;
  row.position = site.position;
  row.effect_allele = site.alt;
  row.other_allele = site.ref;
  row.effect_allele_frequency = allele_frequency;
  row.variant_id = make_variant_id(site, chromosome);
  row.rsid = looks_like_rsid(site.id) ? site.id : std::string();
  row.n = trait.set.genotype_index.size();
  row.info.reset();
  if (site.source == DosageField::ds || site.source == DosageField::gp) {
    row.info = variance_of(summary) / (2.0 * allele_frequency * (1.0 - allele_frequency));
  }
  row.mac = std::min(summary.allele_count, summary.allele_slots - summary.allele_count);
  row.call_rate = static_cast<double>(summary.called) / static_cast<double>(row.n);
  row.hwe_log_p.reset();
  if (summary.hom_ref + summary.het + summary.hom_alt > 0) {
    row.hwe_log_p = hardy_weinberg_exact_log_p(summary.hom_ref, summary.het, summary.hom_alt);
  }
  row.n_cases.reset();
  if (trait.set.kind == TraitKind::binary) row.n_cases = trait.set.case_count;
}

// The first QC floor the variant fails, or qc_reason_count when it passes all.
int failed_floor(const QcFloors& floors, const ResultRow& row) {
  const double minor_frequency = std::min(row.effect_allele_frequency, 1.0 - row.effect_allele_frequency);
  if (minor_frequency < floors.minor_allele_frequency) return qc_maf;
  if (row.mac < floors.minor_allele_count) return qc_mac;
  if (row.info && *row.info < floors.info) return qc_info;
  if (row.call_rate < floors.call_rate) return qc_call_rate;
  if (row.hwe_log_p && floors.hwe_p > 0.0 && *row.hwe_log_p < std::log(floors.hwe_p)) return qc_hwe;
  return qc_reason_count;
}

bool should_confirm(const TraitContext& trait, double score_log_p) {
  if (trait.confirm_below <= 0.0) return false;
  if (trait.confirm_below >= 1.0) return true;
  return score_log_p < std::log(trait.confirm_below);
}

double spread_of(double score_log_p, double wald_log_p, double lrt_log_p) {
  const double values[] = {neg_log10_from_log(score_log_p), neg_log10_from_log(wald_log_p),
                           neg_log10_from_log(lrt_log_p)};
  const auto [low, high] = std::minmax_element(std::begin(values), std::end(values));
  return *high - *low;
}

void fill_score_columns(const TraitContext& trait, const ScoreResult& score, ResultRow& row) {
  row.test = trait.saddlepoint ? "score_spa" : "score";
  row.beta = score.beta;
  row.standard_error = score.se;
  row.log_p = score.log_p;
  row.score_chisq = score.chisq;
  row.score_log_p = score.log_p;
  row.wald_chisq.reset();
  row.wald_log_p.reset();
  row.lrt_chisq.reset();
  row.lrt_log_p.reset();
  row.log10p_spread.reset();
}

void fill_confirmed_columns(const ConfirmResult& confirmed, const char* test, ResultRow& row) {
  row.test = test;
  row.beta = confirmed.beta;
  row.standard_error = confirmed.se;
  row.log_p = confirmed.lrt_log_p;
  row.wald_chisq = confirmed.wald_chisq;
  row.wald_log_p = confirmed.wald_log_p;
  row.lrt_chisq = confirmed.lrt_chisq;
  row.lrt_log_p = confirmed.lrt_log_p;
  row.log10p_spread = spread_of(row.score_log_p, confirmed.wald_log_p, confirmed.lrt_log_p);
}

ConfirmResult from_firth(const FirthResult& firth) {
  ConfirmResult result;
  result.beta = firth.beta;
  result.se = firth.se;
  result.wald_chisq = firth.wald_chisq;
  result.wald_log_p = firth.wald_log_p;
  result.lrt_chisq = firth.lrt_chisq;
  result.lrt_log_p = firth.lrt_log_p;
  result.iterations = firth.iterations;
  result.converged = firth.converged;
  return result;
}

bool wants_firth(const TraitContext& trait, const ConfirmResult& standard, double minor_allele_count) {
  if (trait.set.kind != TraitKind::binary) return false;
  switch (trait.penalized_refit) {
    case PenalizedRefit::always: return true;
    case PenalizedRefit::never: return false;
    case PenalizedRefit::automatic: break;
  }
  return !standard.converged || minor_allele_count < kFirthBelowMinorAlleleCount;
}

// The standard refit, replaced by Firth's where the standard one cannot be
// trusted: separation, no convergence, or too few copies of the minor allele.
void confirm_row(const TraitContext& trait, const Eigen::VectorXd& column, ResultRow& row, TraitTally& tally) {
  const bool firth_first = trait.set.kind == TraitKind::binary && trait.penalized_refit == PenalizedRefit::always;
  ConfirmResult confirmed;
  bool by_firth = firth_first;
  if (!firth_first) {
    confirmed = confirm_variant(trait.model, column);
    by_firth = wants_firth(trait, confirmed, row.mac);
  }
  if (by_firth) {
    confirmed = from_firth(firth_refit(trait.model, column));
    ++tally.firth;
  }
  if (!confirmed.converged) ++tally.confirm_not_converged;
  fill_confirmed_columns(confirmed, by_firth ? "firth_lrt" : "lrt", row);
  ++tally.confirmed;
}

// The saddlepoint tail replaces the normal one beyond its cut-off; below it
// the two agree, so the plain p-value stands and null variants stay cheap.
void calibrate_score(const TraitContext& trait, const GatheredBlock& gathered, TraitScratch& scratch,
                     std::size_t width, std::size_t site_idx, ScoreResult& score) {
  constexpr double kNormalCutoff = 2.0;
  if (!trait.saddlepoint || score.chisq < kNormalCutoff * kNormalCutoff) return;
  copy_column(gathered, width, site_idx, scratch.column);
  score.log_p = saddlepoint_score_log_p(*trait.saddlepoint, scratch.column, score.u, score.v, kNormalCutoff).log_p;
}

std::string describe_discordance(const TraitContext& trait, const ResultRow& row) {
  char text[256];
  std::snprintf(text, sizeof text,
                "flag: %s %s: -log10 p score %.3f, Wald %.3f, LR %.3f (spread %.2f > %.2f)",
                trait.set.trait.c_str(), row.variant_id.c_str(), neg_log10_from_log(row.score_log_p),
                neg_log10_from_log(*row.wald_log_p), neg_log10_from_log(*row.lrt_log_p),
                *row.log10p_spread, trait.spread_flag);
  return text;
}

}  // namespace

bool SiteSummary::varies() const {
  if (called < 2) return false;
  const double mean = sum / static_cast<double>(called);
  // Dosages are at most 2 and come from text with a few decimals, so a
  // spread below 1e-12 can only be rounding in the sums.
  return sum_squares - mean * sum > 1e-12 * static_cast<double>(called);
}

void process_trait_block(const TraitContext& trait, const DosageBlock& block, const GatheredBlock& gathered,
                         const std::vector<std::string>& chromosomes, TraitScratch& scratch,
                         TraitBlockOutput& output) {
  output.rows.clear();
  output.tally = TraitTally{};
  output.discordant_notes.clear();
  const std::size_t width = block.size();
  if (width == 0) return;

  scratch.scores.resize(width);
  trait.kernel->compute(gathered.genotypes.data(), width, scratch.score_scratch, scratch.scores.data());

  ResultRow row;
  for (std::size_t site_idx = 0; site_idx < width; ++site_idx) {
    if (trait.selection &&
        !is_selected(*trait.selection, trait.set.trait, block.sites[site_idx], chromosomes[site_idx])) {
      continue;
    }
    const SiteSummary& summary = gathered.summaries[site_idx];
    if (!summary.varies()) {
      ++output.tally.monomorphic;
      continue;
    }
    ScoreResult& score = scratch.scores[site_idx];
    if (!score.testable) {
      ++output.tally.in_covariate_span;
      continue;
    }
    fill_site_columns(trait, block.sites[site_idx], chromosomes[site_idx], summary, row);
    const int floor = failed_floor(trait.floors, row);
    if (floor != qc_reason_count) {
      ++output.tally.filtered[floor];
      continue;
    }
    calibrate_score(trait, gathered, scratch, width, site_idx, score);
    fill_score_columns(trait, score, row);
    if (should_confirm(trait, score.log_p)) {
      copy_column(gathered, width, site_idx, scratch.column);
      confirm_row(trait, scratch.column, row, output.tally);
      if (*row.log10p_spread > trait.spread_flag) {
        ++output.tally.discordant;
        output.discordant_notes.push_back(describe_discordance(trait, row));
      }
    }
    append_result_row(row, output.rows);
    ++output.tally.written;
  }
}

}  // namespace tamis
