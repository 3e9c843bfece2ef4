// Variants named in lists and on the command line: chr:pos:ref:alt keys and
// the contig names a chromosome code can stand for.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

namespace tamis {

// A list entry that names one allele: chromosome, position >= 1, ref, alt.
struct AlleleKey {
  std::string chromosome;
  std::int64_t position = 0;
  std::string ref;
  std::string alt;
};

// A complete chr:pos:ref:alt (alleles in bases, ALT also * or <ID>), else nothing.
std::optional<AlleleKey> parse_allele_key(const std::string& entry);

// The contig names a written chromosome code (GWAS-SSF, "1".."25") can stand for in a VCF.
std::vector<std::string> contig_candidates(const std::string& code);

}  // namespace tamis
