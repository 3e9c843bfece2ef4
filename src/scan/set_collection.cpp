#include "scan/set_collection.hpp"

#include <algorithm>
#include <cmath>

#include "scan/trait_pass.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {

const char* set_weighting_name(SetWeighting weighting) {
  switch (weighting) {
    case SetWeighting::beta: return "beta_1_25";
    case SetWeighting::flat: return "flat";
    case SetWeighting::listed: return "listed";
  }
  return "beta_1_25";
}

std::int64_t cut_outside_sets(const VariantSets& sets, const std::string& contig, std::int64_t first_position) {
  const std::string key = set_contig_key(contig);
  std::int64_t cut = first_position;
  for (bool moved = true; moved;) {
    moved = false;
    for (std::size_t set_idx = 0; set_idx < sets.size(); ++set_idx) {
      const VariantSetDefinition& set = sets.set(set_idx);
      if (set.contig_key != key || set.start <= 0 || set.end <= 0) continue;
      if (set.start < cut && set.end >= cut) {
        cut = set.end + 1;
        moved = true;
      }
    }
  }
  return cut;
}

bool has_id_only_entries(const VariantSets& sets) {
  for (std::size_t set_idx = 0; set_idx < sets.size(); ++set_idx) {
    for (const SetListEntry& entry : sets.set(set_idx).entries) {
      if (entry.position == 0) return true;
    }
  }
  return false;
}

void find_block_sets(const VariantSets& sets, const DosageBlock& block, BlockSets& out) {
  out.of_site.resize(block.size());
  out.contig_keys.resize(block.size());
  std::string last_contig;
  std::string last_key;
  for (std::size_t site_idx = 0; site_idx < block.size(); ++site_idx) {
    const VariantSite& site = block.sites[site_idx];
    // Blocks rarely change contig: the key is worked out once per run of sites.
    if (site_idx == 0 || site.chromosome != last_contig) {
      last_contig = site.chromosome;
      last_key = set_contig_key(site.chromosome);
    }
    out.contig_keys[site_idx] = last_key;
    sets.find_sets(last_key, site.position, site.id, site.ref, site.alt, out.of_site[site_idx]);
  }
}

namespace {

// The site's dosages over the analysis samples, a missing one imputed, kept
// where they are not 0 (a rare variant's carriers, and imputed fills).
void sparse_dosages(const TraitContext& trait, const DosageBlock& block, std::size_t site_idx, double fill,
                    SparseColumn& out) {
  const std::vector<std::size_t>& samples = trait.set.genotype_index;
  const double* dosages = block.site_dosages(site_idx);
  out.samples.clear();
  out.values.clear();
  auto keep = [&](std::size_t sample_idx, double value) {
    if (value == 0.0) return;
    out.samples.push_back(static_cast<std::uint32_t>(sample_idx));
    out.values.push_back(std::isnan(value) ? fill : value);
  };
  // Every genotype sample analysed (the usual case): one pass over the row,
  // eight at a time past the runs of zeros (NaN, a missing dosage, is not
  // zero and so is kept).
  if (samples.size() == block.sample_count) {
    constexpr std::size_t kRun = 8;
    std::size_t sample_idx = 0;
    for (; sample_idx + kRun <= samples.size(); sample_idx += kRun) {
      bool any = false;
      for (std::size_t lane = 0; lane < kRun; ++lane) any |= dosages[sample_idx + lane] != 0.0;
      if (!any) continue;
      for (std::size_t lane = 0; lane < kRun; ++lane) keep(sample_idx + lane, dosages[sample_idx + lane]);
    }
    for (; sample_idx < samples.size(); ++sample_idx) keep(sample_idx, dosages[sample_idx]);
    return;
  }
  for (std::size_t sample_idx = 0; sample_idx < samples.size(); ++sample_idx) keep(sample_idx, dosages[samples[sample_idx]]);
}

// The column a model adjusted (imputed and whitened) for the kernel, read
// back at each analysis sample's kernel row.
void sparse_kernel_column(const TraitSetContext& sets, const KernelInput& input, std::size_t width,
                          std::size_t site_idx, SparseColumn& out) {
  out.samples.clear();
  out.values.clear();
  const std::vector<std::size_t>& rows = sets.kernel_row_of_sample;
  for (std::size_t sample_idx = 0; sample_idx < rows.size(); ++sample_idx) {
    const double value = input.genotypes[rows[sample_idx] * width + site_idx];
    if (value == 0.0) continue;
    out.samples.push_back(static_cast<std::uint32_t>(sample_idx));
    out.values.push_back(value);
  }
}

}  // namespace

void collect_set_variant(const TraitContext& trait, const TraitSetContext& sets, const DosageBlock& block,
                         const BlockSets& block_sets, const GatheredBlock& gathered, const KernelInput& input,
                         const double* projections, std::size_t site_idx, double fill, const ScoreResult& score,
                         const ResultRow& row, std::vector<SetVariant>& out) {
  const std::vector<SetMembership>& memberships = block_sets.of_site[site_idx];
  if (memberships.empty()) return;
  const double frequency = row.effect_allele_frequency;
  const double minor_frequency = std::min(frequency, 1.0 - frequency);
  if (minor_frequency > sets.maf_ceiling) return;

  SetVariant variant;
  variant.variant_id = row.variant_id;
  variant.chromosome = row.chromosome;
  variant.contig_key = block_sets.contig_keys[site_idx];
  variant.position = row.position;
  variant.minor_allele_frequency = minor_frequency;
  variant.mac = row.mac;
  variant.sign = frequency > 0.5 ? -1.0 : 1.0;
  variant.u = score.u;
  variant.log_p = row.log_p;
  const std::size_t width = block.size();
  const std::size_t basis_columns = static_cast<std::size_t>(trait.model.basis.cols());
  variant.projections.resize(basis_columns);
  for (std::size_t column_idx = 0; column_idx < basis_columns; ++column_idx) {
    variant.projections[column_idx] = projections[column_idx * width + site_idx];
  }
  // A plain model's kernel reads the gathered dosages as they are (missing
  // ones imputed by the kernel); a mixed model's reads its own adjusted copy.
  const bool kernel_reads_dosages = input.genotypes == gathered.genotypes.data();
  if (kernel_reads_dosages) {
    sparse_dosages(trait, block, site_idx, fill, variant.column);
  } else {
    sparse_kernel_column(sets, input, width, site_idx, variant.column);
    if (trait.saddlepoint) sparse_dosages(trait, block, site_idx, fill, variant.dosages);
  }
  variant.sets = memberships;
  out.push_back(std::move(variant));
}

}  // namespace tamis
