// What the report keeps of one results file: a few numbers per variant for
// the plots and the genomic inflation factor, and the full text of the rows
// that pass the lead threshold (usually a handful) for the loci table.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string_view>
#include <string>
#include <unordered_map>
#include <vector>

namespace tamis::report {

// A row below the lead threshold, kept whole enough to be listed.
struct LeadCandidate {
  std::size_t variant_idx = 0;
  double neg_log_10_p = 0.0;  // full precision: it orders the leads
  std::string p_value_text;   // as written, so 3.2e-1088 survives
  std::string neg_log_10_p_text;
  std::string beta_text;
  std::string variant_id;
  std::string rsid;  // "#NA" when absent
};

struct TraitResults {
  std::string trait;        // from the sidecar's trait_description, else the file name
  std::string source_path;  // the results file
  std::string log_path;     // PREFIX.log beside it (may not exist)

  // Contigs in plotting order; chromosome_of indexes into this.
  std::vector<std::string> chromosome_names;
  std::vector<std::uint32_t> chromosome_of;
  std::vector<std::int64_t> position_of;
  std::vector<float> neg_log_10_p_of;  // NaN where the file has #NA
  std::vector<float> score_chisq_of;   // NaN where the file has #NA

  std::vector<LeadCandidate> candidates;
  std::size_t n_rows = 0;
  std::size_t n_below_genome_wide = 0;  // p < 5e-8
  std::size_t n_discordant = 0;         // confirmed rows with log10p_spread > 1
  double max_neg_log_10_p = 0.0;
};

// Maps contig names to indices into `names`, adding new ones in order of
// first appearance; rows arrive grouped by contig, so the last name is
// checked before the table.
class ContigIndexer {
 public:
  std::uint32_t index_of(std::string_view name, std::vector<std::string>& names);

 private:
  std::unordered_map<std::string, std::uint32_t> indices_;
  std::uint32_t last_index_ = 0;
};

// GWAS-SSF codes are plotted 1..25 whatever order the file met them in;
// contig names (as-is mode) keep their order of first appearance.
void order_chromosomes(TraitResults& results);

// Streams one results file once. Throws tamis::Error (results_input) for a
// malformed file.
TraitResults load_trait_results(const std::string& path, double lead_threshold);

// Whether a p-value written as text lies strictly below `threshold`; p-values
// below the double range ("3.2e-1088") count as below any positive threshold.
std::optional<bool> p_text_is_below(std::string_view p_text, double threshold);  // empty: not a number

// GWAS-SSF codes 23, 24, 25 are shown as X, Y, MT; anything else as written.
std::string chromosome_display_name(const std::string& chromosome);

// The trait and the run log that belong to a results file, from its sidecar
// (PATH-meta.yaml, trait_description) when present, else from its name
// PREFIX.TRAIT.tsv.gz.
struct ResultsProvenance {
  std::string trait;
  std::string log_path;
};
ResultsProvenance find_provenance(const std::string& results_path);

}  // namespace tamis::report
