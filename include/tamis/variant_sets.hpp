// Variant sets for `scan --sets`: genes, regions or masks whose variants
// are tested together. Read once, held in memory (a whole exome's genes
// take a few megabytes), and asked for each variant which sets take it.
#pragma once

#include <cstddef>
#include <cstdint>
#include <limits>
#include <memory>
#include <string>
#include <vector>

namespace tamis {

// Two formats, told apart by the file name:
// - BED (".bed", ".bed.gz"): chrom, start (0-based), end (half-open), set
//   name in column 4; further columns are ignored; header lines ("track",
//   "browser", "#") are skipped. A set may span several lines (exons of a
//   gene), all on one chromosome.
// - A list (any other name): set name, variant, and an optional third
//   column with the variant's weight in that set. The variant is either
//   chr:pos:ref:alt (matched on chromosome, position and alleles) or any
//   other text, matched against the VCF ID column (whole, or one of its
//   semicolon-separated IDs). Lines starting with '#' are comments.
//   chr:pos:ref:alt is text of exactly four colon-separated parts; such text
//   with a position that is not a whole number >= 1, or alleles not of
//   A/C/G/T/N (any case; stored upper case; an ALT may also be '*' or a
//   symbolic <ID>), is an error, not an ID. A set's lines need not be
//   adjacent; its chr:pos:ref:alt entries lie on one chromosome.
// Fields are separated by tabs or runs of spaces; files may be plain or
// gzip/BGZF-compressed whatever their name. Blank lines are skipped.
//
// Set order (set_index): by chromosome (numbered contigs by number, then X,
// Y, MT, then other contig keys by name), start, end and name; list sets of
// ID entries only come last, in the order they first appear in the file.
enum class SetFileFormat { bed, list };
SetFileFormat set_file_format_of(const std::string& path);

// Chromosome names compared between the set file and the genotype files:
// a leading "chr" (any case) dropped, "M" as "MT", "23"/"24"/"25" as
// "X"/"Y"/"MT"; other contigs as they are.
std::string set_contig_key(const std::string& contig);

struct SetInterval {
  std::int64_t first = 0;  // 1-based, inclusive
  std::int64_t last = 0;
};

struct SetListEntry {
  // chr:pos:ref:alt entries: the contig key, position and upper-case alleles
  // (id empty); ID entries: id only (position 0).
  std::string id;
  std::string contig_key;
  std::int64_t position = 0;  // 0 for an ID entry
  std::string ref, alt;
  double weight = std::numeric_limits<double>::quiet_NaN();  // NaN: none given
};

struct VariantSetDefinition {
  std::string name;
  std::string contig_key;  // empty for a list set of ID entries only (its chromosome is known once seen)
  // The extent the file gives, 1-based and inclusive: BED lines' union
  // span; a list's chr:pos:ref:alt positions. 0 when unknown (IDs only).
  std::int64_t start = 0;
  std::int64_t end = 0;
  std::vector<SetInterval> intervals;  // BED sets: the lines' intervals, sorted and merged
  std::vector<SetListEntry> entries;   // list sets
  std::size_t first_line = 0;          // where the set first appears, for messages
};

struct SetFileOptions {
  // A set with more variants than this is skipped with a warning (lists:
  // entries; BED sets are checked by the scan as their variants stream in).
  std::size_t max_variants = 5000;
};

// What a variant belongs to: the set's index and the weight the file gives
// it there (NaN when none).
struct SetMembership {
  std::uint32_t set_index = 0;
  double weight = std::numeric_limits<double>::quiet_NaN();
};

struct SetFileSummary {
  std::size_t sets = 0;           // kept
  std::size_t lines = 0;          // data lines read
  std::size_t skipped_too_large = 0;
  std::vector<std::string> warnings;  // one line each, for the run log
};

class VariantSets {
 public:
  // Reads and checks the file. Throws tamis::Error (usage) naming the file,
  // line and column for: a malformed line (too few columns, a start or end
  // that is not a non-negative integer, an end not after its start, an empty
  // set name), a malformed chr:pos:ref:alt, a weight that is negative, zero
  // or not a finite number, one set's lines on two chromosomes, the same
  // variant listed twice in one set, or a file with no set at all. A list
  // set above max_variants is skipped with a warning (an error if that
  // leaves no set). A list line has 2 or 3 columns; '.' is neither a set
  // name nor a variant. A file that cannot be read to its end (a damaged or
  // truncated .gz) is an error too.
  static VariantSets load(const std::string& path, const SetFileOptions& options = {});

  std::size_t size() const { return sets_.size(); }
  const VariantSetDefinition& set(std::size_t set_index) const { return sets_[set_index]; }
  SetFileFormat format() const { return format_; }
  const SetFileSummary& summary() const { return summary_; }

  // Appends to `out` (cleared first) the sets that take a variant, in
  // increasing set index, each once (a list set that takes the variant by
  // its alleles and by IDs gives the allele entry's weight, else that of the
  // record's ID it lists first: the whole ID column, then its parts in
  // order). Alleles are compared ignoring case; an ID of "." matches
  // nothing. BED sets carry no weights. Thread-safe (const, no caching). `contig_key` is
  // set_contig_key of the record's contig, `id` its ID column.
  void find_sets(const std::string& contig_key, std::int64_t position, const std::string& id,
                 const std::string& ref, const std::string& alt, std::vector<SetMembership>& out) const;

 private:
  SetFileFormat format_ = SetFileFormat::bed;
  std::vector<VariantSetDefinition> sets_;
  SetFileSummary summary_;
  struct Index;
  std::shared_ptr<const Index> index_;
};

}  // namespace tamis
