#include "scan/conditioning.hpp"

#include <cmath>
#include <fstream>
#include <optional>

#include "scan/variant_keys.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {
namespace {

std::string trimmed(const std::string& text) {
  const std::size_t first = text.find_first_not_of(" \t\r");
  if (first == std::string::npos) return "";
  return text.substr(first, text.find_last_not_of(" \t\r") - first + 1);
}

// The chromosome codes a contig name stands for, so that "chr1" in a list
// matches contig "1" in a file and the reverse.
std::string chromosome_code(const std::string& contig) {
  const std::optional<std::string> code = map_chromosome_ssf(contig);
  return code ? *code : contig;
}

struct ConditionRequest {
  std::string entry;
  std::optional<AlleleKey> key;  // nothing: an ID of the VCF ID column
  std::vector<VariantSite> matches;
  std::vector<double> dosages;
};

bool id_column_holds(const std::string& id_column, const std::string& id) {
  if (id_column == id) return true;
  std::size_t start = 0;
  while (start <= id_column.size()) {
    const std::size_t end = std::min(id_column.find(';', start), id_column.size());
    if (id_column.compare(start, end - start, id) == 0) return true;
    start = end + 1;
  }
  return false;
}

bool request_matches(const ConditionRequest& request, const VariantSite& site) {
  if (!request.key) return id_column_holds(site.id, request.entry);
  const AlleleKey& key = *request.key;
  return site.position == key.position && site.ref == key.ref && site.alt == key.alt &&
         chromosome_code(site.chromosome) == chromosome_code(key.chromosome);
}

std::vector<GenomicRegion> regions_of(const std::vector<ConditionRequest>& requests) {
  std::vector<GenomicRegion> regions;
  for (const ConditionRequest& request : requests) {
    if (!request.key) return {};  // an ID may be anywhere: read the files whole
    const AlleleKey& key = *request.key;
    std::vector<std::string> contigs = contig_candidates(chromosome_code(key.chromosome));
    contigs.push_back(key.chromosome);
    for (const std::string& contig : contigs) regions.push_back({contig, key.position, key.position});
  }
  return regions;
}

void scan_for_requests(const ScanOptions& options, std::vector<ConditionRequest>& requests) {
  GenotypeReaderOptions reader_options;
  reader_options.paths = options.genotype_paths;
  reader_options.field = options.dosage_field;
  reader_options.haploid_dosage = options.haploid_dosage;
  reader_options.regions = regions_of(requests);
  GenotypeReader reader(reader_options);
  RecordBatch batch;
  DosageBlock block;
  while (reader.read_batch(batch, 256) > 0) {
    block.clear();
    block.sample_count = reader.sample_ids().size();
    batch.decode(block);
    for (std::size_t site_idx = 0; site_idx < block.size(); ++site_idx) {
      for (ConditionRequest& request : requests) {
        if (!request_matches(request, block.sites[site_idx])) continue;
        request.matches.push_back(block.sites[site_idx]);
        const double* dosages = block.site_dosages(site_idx);
        request.dosages.assign(dosages, dosages + block.sample_count);
      }
    }
  }
}

std::string joined_paths(const std::vector<std::string>& paths) {
  std::string text;
  for (const std::string& path : paths) text += (text.empty() ? "" : ", ") + path;
  return text;
}

std::string record_place(const ScanOptions& options, const VariantSite& site) {
  return options.genotype_paths[site.file_index] + ", record " + std::to_string(site.record_number) + " (" +
         site.chromosome + ":" + std::to_string(site.position) + ")";
}

// One allele of one record, or a clear error.
void check_request_found(const ScanOptions& options, const ConditionRequest& request) {
  if (request.matches.empty()) {
    throw Error(ExitCode::genotype_input, joined_paths(options.genotype_paths),
                "the conditioning variant '" + request.entry + "' is in none of the genotype files",
                request.key ? "check the chromosome, position and alleles (REF and ALT as the file writes them)"
                            : "check the ID, or name the variant as chr:pos:ref:alt");
  }
  const VariantSite& first = request.matches.front();
  if (!request.key && first.alt_count > 1) {
    throw Error(ExitCode::genotype_input, record_place(options, first),
                "the conditioning variant '" + request.entry + "' names a record with " +
                    std::to_string(first.alt_count) + " ALT alleles",
                "name the allele to condition on as " + first.chromosome + ":" + std::to_string(first.position) +
                    ":" + first.ref + ":" + first.alt + " (or another of its ALT alleles)");
  }
  if (request.matches.size() > 1) {
    throw Error(ExitCode::genotype_input, record_place(options, request.matches[1]),
                "the conditioning variant '" + request.entry + "' matches " +
                    std::to_string(request.matches.size()) + " records",
                "name one allele as chr:pos:ref:alt, or leave the duplicate record out of the files");
  }
}

}  // namespace

std::string site_label(const VariantSite& site) {
  return site.chromosome + ":" + std::to_string(site.position) + ":" + site.ref + ":" + site.alt;
}

std::vector<std::string> read_condition_list(const std::string& path) {
  std::ifstream input(path);
  if (!input) throw Error(ExitCode::usage, path, "cannot read the list of conditioning variants", "check the path");
  std::vector<std::string> entries;
  std::string line;
  while (std::getline(input, line)) {
    const std::string entry = trimmed(line);
    if (!entry.empty() && entry[0] != '#') entries.push_back(entry);
  }
  return entries;
}

std::vector<ConditionVariant> read_condition_variants(const ScanOptions& options) {
  if (options.condition_on.empty()) return {};
  std::vector<ConditionRequest> requests;
  for (const std::string& entry : options.condition_on) requests.push_back({entry, parse_allele_key(entry), {}, {}});
  scan_for_requests(options, requests);
  std::vector<ConditionVariant> variants;
  for (ConditionRequest& request : requests) {
    check_request_found(options, request);
    variants.push_back({request.entry, site_label(request.matches.front()), std::move(request.dosages)});
  }
  return variants;
}

std::optional<AnalysisDosages> dosages_over_samples(const double* dosages, const std::vector<std::size_t>& genotype_index) {
  AnalysisDosages out;
  double lowest = INFINITY, highest = -INFINITY;
  for (std::size_t sample : genotype_index) {
    if (std::isnan(dosages[sample])) continue;
    out.sum += dosages[sample];
    out.called += 1.0;
    lowest = std::fmin(lowest, dosages[sample]);
    highest = std::fmax(highest, dosages[sample]);
  }
  if (!(highest > lowest)) return std::nullopt;
  const double mean = out.sum / out.called;
  out.values.resize(static_cast<Eigen::Index>(genotype_index.size()));
  for (std::size_t sample_idx = 0; sample_idx < genotype_index.size(); ++sample_idx) {
    const double dosage = dosages[genotype_index[sample_idx]];
    out.values[static_cast<Eigen::Index>(sample_idx)] = std::isnan(dosage) ? mean : dosage;
  }
  return out;
}

void add_condition_columns(const std::vector<ConditionVariant>& variants, AnalysisSet& set) {
  if (variants.empty()) return;
  const Eigen::Index base = set.design.cols();
  set.design.conservativeResize(Eigen::NoChange, base + static_cast<Eigen::Index>(variants.size()));
  for (std::size_t variant_idx = 0; variant_idx < variants.size(); ++variant_idx) {
    const ConditionVariant& variant = variants[variant_idx];
    const std::optional<AnalysisDosages> column = dosages_over_samples(variant.dosages.data(), set.genotype_index);
    if (!column) {
      throw Error(ExitCode::model, "--condition-on " + variant.requested + ", trait " + set.trait,
                  "the conditioning variant " + variant.label + " does not vary among the trait's " +
                      std::to_string(set.genotype_index.size()) + " analysis samples",
                  "leave it out of --condition-on: a constant covariate adjusts for nothing");
    }
    set.design.col(base + static_cast<Eigen::Index>(variant_idx)) = column->values;
    set.design_names.push_back("condition " + variant.label);
  }
}

}  // namespace tamis
