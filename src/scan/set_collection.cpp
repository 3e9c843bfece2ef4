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
  out.genotype_entries.resize(block.size());
  out.genotype_entries_found.assign(block.size(), 0);
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

std::vector<std::int32_t> analysis_row_of_genotype_sample(const std::vector<std::size_t>& genotype_index,
                                                          std::size_t genotype_samples) {
  std::vector<std::int32_t> rows(genotype_samples, -1);
  for (std::size_t row = 0; row < genotype_index.size(); ++row) rows[genotype_index[row]] = static_cast<std::int32_t>(row);
  return rows;
}

namespace {

// The site's dosages that are not 0 over every genotype sample, a missing
// one kept as NaN: one pass over the row, eight at a time past the runs of zeros.
void find_genotype_entries(const DosageBlock& block, std::size_t site_idx, SparseColumn& out) {
  const double* dosages = block.site_dosages(site_idx);
  const std::size_t count = block.sample_count;
  // Written in place and cut to length after: imputed dosages are mostly
  // not 0, and growing the vectors entry by entry would cost more than the pass.
  out.samples.resize(count);
  out.values.resize(count);
  std::size_t kept = 0;
  constexpr std::size_t kRun = 8;
  std::size_t sample_idx = 0;
  auto keep_run = [&](std::size_t end) {
    for (; sample_idx < end; ++sample_idx) {
      out.samples[kept] = static_cast<std::uint32_t>(sample_idx);
      out.values[kept] = dosages[sample_idx];
      kept += dosages[sample_idx] != 0.0;  // NaN, a missing dosage, is not 0 and so is kept
    }
  };
  while (sample_idx + kRun <= count) {
    bool any = false;
    for (std::size_t lane = 0; lane < kRun; ++lane) any |= dosages[sample_idx + lane] != 0.0;
    if (any) {
      keep_run(sample_idx + kRun);
    } else {
      sample_idx += kRun;
    }
  }
  keep_run(count);
  out.samples.resize(kept);
  out.values.resize(kept);
}

// The site's dosages over the trait's analysis samples, a missing one
// imputed, kept where they are not 0 (a rare variant's carriers, and
// imputed fills): the block's shared entries, read through the trait's rows;
// or all of them, dense, where most are not 0.
void sparse_dosages(const TraitSetContext& sets, const std::vector<std::size_t>& genotype_index,
                    const DosageBlock& block, const BlockSets& block_sets, std::size_t site_idx, double fill,
                    SparseColumn& out) {
  if (!block_sets.genotype_entries_found[site_idx]) {
    find_genotype_entries(block, site_idx, block_sets.genotype_entries[site_idx]);
    block_sets.genotype_entries_found[site_idx] = 1;
  }
  const SparseColumn& entries = block_sets.genotype_entries[site_idx];
  const std::vector<std::int32_t>& rows = sets.analysis_row_of_genotype_sample;
  const std::size_t count = sets.kernel_row_of_sample.size();
  if (keep_dense(entries.samples.size(), count)) {
    // Mostly not 0: every analysis sample's dosage, straight from the block's row.
    const double* dosages = block.site_dosages(site_idx);
    out.samples.clear();
    out.values.resize(count);
    for (std::size_t row = 0; row < count; ++row) {
      const double value = dosages[genotype_index[row]];
      out.values[row] = std::isnan(value) ? fill : value;
    }
    return;
  }
  if (rows.size() == count) {
    // Every genotype sample analysed (the usual case): the rows are the samples.
    out.samples = entries.samples;
    out.values = entries.values;
    for (double& value : out.values) value = std::isnan(value) ? fill : value;
    return;
  }
  out.samples.clear();
  out.values.clear();
  out.samples.reserve(entries.samples.size());
  out.values.reserve(entries.samples.size());
  for (std::size_t entry = 0; entry < entries.samples.size(); ++entry) {
    const std::int32_t row = rows[entries.samples[entry]];
    if (row < 0) continue;  // rows rise with the genotype samples: the order holds
    out.samples.push_back(static_cast<std::uint32_t>(row));
    out.values.push_back(std::isnan(entries.values[entry]) ? fill : entries.values[entry]);
  }
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
  if (keep_dense(out.samples.size(), rows.size())) {
    std::vector<double> spread(rows.size(), 0.0);
    for (std::size_t entry = 0; entry < out.samples.size(); ++entry) spread[out.samples[entry]] = out.values[entry];
    out.samples.clear();
    out.values = std::move(spread);
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
    sparse_dosages(sets, trait.set.genotype_index, block, block_sets, site_idx, fill, variant.column);
  } else {
    sparse_kernel_column(sets, input, width, site_idx, variant.column);
    if (trait.saddlepoint) sparse_dosages(sets, trait.set.genotype_index, block, block_sets, site_idx, fill, variant.dosages);
  }
  variant.sets = memberships;
  out.push_back(std::move(variant));
}

}  // namespace tamis
