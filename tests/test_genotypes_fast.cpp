// The specialised VCF text decoder against htslib's own parser.
//
// Every line is decoded twice: by the specialised decoder alone (which may
// decline a line) and by htslib 1.16's vcf_parse followed by the decoding
// used for BCF records. Where the specialised decoder accepts a line, the
// two must agree on every output: sites, dosages bit for bit, ploidy and
// calls. The normal path (specialised, else htslib) must give htslib's
// result or htslib's error, word for word. Lines come from fixtures and
// from a random generator.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <cstring>
#include <fstream>
#include <functional>
#include <iomanip>
#include <optional>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "genotypes/fast_vcf.hpp"
#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis {
namespace {

using genotype_detail::DecodeMode;
using genotype_detail::DecodePath;
using genotype_detail::FileInfo;

std::string fixture(const std::string& name) { return testing::source_dir() + "/test_data/" + name; }

struct SplitVcf {
  std::string header;
  std::vector<std::string> lines;
};

SplitVcf split_vcf_text(const std::string& text) {
  SplitVcf split;
  std::istringstream stream(text);
  for (std::string line; std::getline(stream, line);) {
    if (!line.empty() && line[0] == '#') {
      split.header += line + "\n";
    } else {
      split.lines.push_back(line);
    }
  }
  return split;
}

std::uint64_t bits_of(double value) {
  std::uint64_t bits = 0;
  std::memcpy(&bits, &value, sizeof bits);
  return bits;
}

// Empty when the blocks are identical; else the first difference.
std::string first_difference(const DosageBlock& left, const DosageBlock& right) {
  if (left.size() != right.size()) {
    return "site count " + std::to_string(left.size()) + " vs " + std::to_string(right.size());
  }
  for (std::size_t site_idx = 0; site_idx < left.size(); ++site_idx) {
    const VariantSite& a = left.sites[site_idx];
    const VariantSite& b = right.sites[site_idx];
    const bool same = a.chromosome == b.chromosome && a.position == b.position && a.id == b.id &&
                      a.ref == b.ref && a.alt == b.alt && a.allele_index == b.allele_index &&
                      a.alt_count == b.alt_count && a.file_index == b.file_index &&
                      a.record_number == b.record_number && a.source == b.source &&
                      a.has_hard_calls == b.has_hard_calls;
    if (!same) {
      return "site " + std::to_string(site_idx) + ": " + a.chromosome + ":" + std::to_string(a.position) +
             " " + a.id + " " + a.ref + ">" + a.alt + " calls " + std::to_string(a.has_hard_calls) +
             " vs " + b.chromosome + ":" + std::to_string(b.position) + " " + b.id + " " + b.ref + ">" +
             b.alt + " calls " + std::to_string(b.has_hard_calls);
    }
  }
  if (left.dosages.size() != right.dosages.size() || left.ploidy != right.ploidy ||
      left.diploid_calls != right.diploid_calls) {
    return "ploidy or calls differ";
  }
  for (std::size_t value_idx = 0; value_idx < left.dosages.size(); ++value_idx) {
    if (bits_of(left.dosages[value_idx]) != bits_of(right.dosages[value_idx])) {
      std::ostringstream text;
      text << std::setprecision(17) << "dosage " << value_idx << ": " << left.dosages[value_idx]
           << " vs " << right.dosages[value_idx];
      return text.str();
    }
  }
  return "";
}

// One line decoded one way: the block, or the error's text.
struct Decoded {
  DecodePath path = DecodePath::declined;
  DosageBlock block;
  std::optional<std::string> error;
};

Decoded decode_line(const std::shared_ptr<const FileInfo>& file, const std::string& line,
                    std::uint64_t record_number, DecodeMode mode) {
  Decoded decoded;
  decoded.block.sample_count = genotype_detail::text_sample_count(*file);
  try {
    decoded.path = genotype_detail::decode_vcf_text_record(file, record_number, line, decoded.block, mode);
  } catch (const Error& error) {
    decoded.error = error.what();
  }
  return decoded;
}

struct Tally {
  int fast = 0;
  int general = 0;
  int errors = 0;
};

// The heart of the comparison, for one line. Returns the path the normal
// decoding took.
DecodePath expect_paths_agree(const std::shared_ptr<const FileInfo>& file, const std::string& line,
                              std::uint64_t record_number, Tally& tally) {
  // Reference: htslib 1.16's vcf_parse, then the decoding used for BCF.
  const Decoded reference = decode_line(file, line, record_number, DecodeMode::general_only);
  const Decoded fast = decode_line(file, line, record_number, DecodeMode::fast_only);
  const Decoded normal = decode_line(file, line, record_number, DecodeMode::automatic);
  EXPECT_FALSE(fast.error.has_value()) << "the specialised decoder alone never throws: " << line;
  if (fast.path == DecodePath::fast) {
    EXPECT_FALSE(reference.error.has_value())
        << "accepted a line that htslib rejects: " << line << "\n" << reference.error.value_or("");
    if (!reference.error) {
      EXPECT_EQ(first_difference(fast.block, reference.block), "") << line;
    }
  } else {
    EXPECT_EQ(fast.block.size(), 0u) << "a declined line must leave the block untouched: " << line;
    EXPECT_TRUE(fast.block.dosages.empty());
  }
  EXPECT_EQ(normal.error, reference.error) << line;
  if (!normal.error && !reference.error) {
    EXPECT_EQ(first_difference(normal.block, reference.block), "") << line;
  }
  if (normal.error) {
    ++tally.errors;
  } else if (normal.path == DecodePath::fast) {
    ++tally.fast;
  } else {
    ++tally.general;
  }
  return normal.path;
}

// ---- fixtures -------------------------------------------------------------

TEST(FastVcfDecoding, UnusualFixtureAgreesWithHtslibForEveryField) {
  const SplitVcf vcf = split_vcf_text(testing::read_text_file(fixture("genotypes_unusual.vcf")));
  ASSERT_EQ(vcf.lines.size(), 19u);
  for (DosageField field : {DosageField::ds, DosageField::gp, DosageField::gt}) {
    for (int haploid_dosage : {1, 2}) {
      SCOPED_TRACE(std::string(dosage_field_name(field)) + " haploid " + std::to_string(haploid_dosage));
      auto file = genotype_detail::make_text_file_info(vcf.header, "unusual.vcf", field, haploid_dosage);
      Tally tally;
      std::vector<DecodePath> paths;
      for (std::size_t line_idx = 0; line_idx < vcf.lines.size(); ++line_idx) {
        paths.push_back(expect_paths_agree(file, vcf.lines[line_idx], line_idx + 1, tally));
      }
      // The layouts the specialised decoder is for must not fall back:
      // records 1 (GT:DS), 2 (multi-allelic), 3 (DS first, extras), 4
      // (omitted fields), 5 (odd decimals), 9 (symbolic ALT), 11 (String
      // first), 13 (POS 01300), 15 (lower-case bases), 18 (GT only).
      if (field == DosageField::ds) {
        for (int record : {1, 2, 3, 4, 5, 9, 11, 13, 15, 16, 17}) {
          EXPECT_EQ(paths[record - 1], DecodePath::fast) << "record " << record;
        }
      }
      // Record 10 has a space before a DS value, 12 exponents, 14 an
      // undeclared INFO key: htslib's parser takes them.
      if (field == DosageField::ds) {
        for (int record : {10, 12, 14}) EXPECT_EQ(paths[record - 1], DecodePath::general) << record;
      }
      if (field == DosageField::gp) {
        for (int record : {6, 7, 17}) EXPECT_EQ(paths[record - 1], DecodePath::fast) << "record " << record;
      }
      if (field == DosageField::gt) {
        for (int record : {1, 2, 3, 8, 18}) EXPECT_EQ(paths[record - 1], DecodePath::fast) << record;
      }
      EXPECT_GT(tally.fast, field == DosageField::gp ? 2 : 8);
    }
  }
}

TEST(FastVcfDecoding, ExistingFixturesAgreeWithHtslib) {
  for (const std::string name : {"genotypes_gt.vcf", "genotypes_ds.vcf", "genotypes_gp.vcf",
                                 "genotypes_bad_ds_text.vcf", "genotypes_bad_ds_count.vcf",
                                 "genotypes_ds_out_of_range.vcf", "genotypes_bad_gt_allele.vcf",
                                 "genotypes_gp_phred.vcf", "genotypes_record_without_ds.vcf"}) {
    const SplitVcf vcf = split_vcf_text(testing::read_text_file(fixture(name)));
    for (DosageField field : {DosageField::ds, DosageField::gp, DosageField::gt}) {
      if (vcf.header.find("ID=" + std::string(dosage_field_name(field)) + ",") == std::string::npos) continue;
      SCOPED_TRACE(name + " " + dosage_field_name(field));
      auto file = genotype_detail::make_text_file_info(vcf.header, name, field);
      Tally tally;
      for (std::size_t line_idx = 0; line_idx < vcf.lines.size(); ++line_idx) {
        expect_paths_agree(file, vcf.lines[line_idx], line_idx + 1, tally);
      }
      if (name.find("bad") == std::string::npos && name.find("phred") == std::string::npos &&
          name.find("without") == std::string::npos && name.find("range") == std::string::npos) {
        EXPECT_GT(tally.fast, 0);
      }
    }
  }
}

// ---- malformed lines: the same errors as htslib's path ---------------------

TEST(FastVcfDecoding, MalformedLinesGiveHtslibPathErrors) {
  const SplitVcf vcf = split_vcf_text(testing::read_text_file(fixture("genotypes_unusual.vcf")));
  auto file = genotype_detail::make_text_file_info(vcf.header, "unusual.vcf", DosageField::ds);
  const std::string site = "1\t100\trs1\tA\tG\t.\tPASS\t.\tGT:DS\t";
  const std::vector<std::pair<std::string, std::string>> cases = {
      {site + "0/0:0\t0/1:abc\t1/1:2\t0/0:0\t0/0:0", "htslib could not parse"},
      {site + "0/0:0\t0/1:0.5,0.5\t1/1:2\t0/0:0\t0/0:0", "DS has 2 value(s), expected 1"},
      {site + "0/0:0\t0/1:2.5\t1/1:2\t0/0:0\t0/0:0", "dosage of 2.5"},
      {site + "0/0:0\t0/1:-0.5\t1/1:2\t0/0:0\t0/0:0", "dosage of -0.5"},
      {site + "0/0:0\t0/3:1\t1/1:2\t0/0:0\t0/0:0", "GT names allele 3"},
      {site + "0/0:0\t0/x:1\t1/1:2\t0/0:0\t0/0:0", "htslib could not parse"},
      {site + "0/0:0\t:1\t1/1:2\t0/0:0\t0/0:0", "htslib could not parse"},
      {site + "0/0:0\t0/1:1\t1/1:2\t0/0:0", "htslib could not parse"},  // a sample short
      {site + "0/0:0\t0/1:1:5\t1/1:2\t0/0:0\t0/0:0", "htslib could not parse"},  // too many fields
      {site + "0/0:0\t0/1:1\t1/1:2\t0/0:0\t0/0:0\r", "htslib could not parse"},
      {"1\t100\trs1\tA\tG\t.\tPASS\t.\tGT:GQ\t0/0:1\t0/1:1\t1/1:2\t0/0:0\t0/0:0", "no FORMAT/DS"},
      // htslib 1.16 takes a line cut after ALT as a record without FORMAT.
      {"1\t100\trs1\tA\tG", "no FORMAT/DS"},
  };
  Tally tally;
  for (std::size_t case_idx = 0; case_idx < cases.size(); ++case_idx) {
    const auto& [line, fragment] = cases[case_idx];
    SCOPED_TRACE(line);
    expect_paths_agree(file, line, 41, tally);
    const Decoded normal = decode_line(file, line, 41, DecodeMode::automatic);
    ASSERT_TRUE(normal.error.has_value());
    EXPECT_NE(normal.error->find(fragment), std::string::npos) << *normal.error;
    EXPECT_NE(normal.error->find("unusual.vcf, record 41"), std::string::npos) << *normal.error;
    if (line.size() > 20) {
      EXPECT_NE(normal.error->find("(1:100)"), std::string::npos) << *normal.error;
    }
  }
  EXPECT_EQ(tally.errors, static_cast<int>(cases.size()));
  // htslib 1.16 reads an empty line as a record without alleles (with
  // warnings), so it yields no site and no error on either path.
  expect_paths_agree(file, "", 42, tally);
  EXPECT_EQ(decode_line(file, "", 42, DecodeMode::automatic).block.size(), 0u);
}

// ---- numbers ----------------------------------------------------------------

TEST(FastVcfDecoding, DsValuesAreHtslibsFloats) {
  const std::string header =
      "##fileformat=VCFv4.3\n##contig=<ID=1>\n"
      "##FORMAT=<ID=DS,Number=A,Type=Float,Description=\"Dosage\">\n"
      "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT\tS1\n";
  auto file = genotype_detail::make_text_file_info(header, "numbers.vcf", DosageField::ds);
  // 0.1 as an IEEE 754 binary32 is 0x3DCCCCCD = 0.100000001490116119384765625
  // (from memory; the standard's round-to-nearest on 0.1).
  Decoded tenth = decode_line(file, "1\t1\t.\tA\tG\t.\t.\t.\tDS\t0.1", 1, DecodeMode::fast_only);
  ASSERT_EQ(tenth.path, DecodePath::fast);
  EXPECT_EQ(tenth.block.dosages[0], 0.100000001490116119384765625);

  std::mt19937_64 random(20240917);
  Tally tally;
  for (int value_idx = 0; value_idx < 20000; ++value_idx) {
    // Random decimals of 1 to 20 significant digits in [0, 2], some with
    // leading or trailing zeros, some exactly halfway between two floats.
    std::ostringstream text;
    const int shape = static_cast<int>(random() % 4);
    if (shape == 0) {
      const float low = std::uniform_real_distribution<float>(0.0f, 2.0f)(random);
      const double halfway = (static_cast<double>(low) + std::nextafter(low, 3.0f)) / 2.0;
      text << std::setprecision(25) << std::fixed << halfway;
    } else {
      const int digits = 1 + static_cast<int>(random() % 20);
      text << std::setprecision(digits) << std::fixed
           << std::uniform_real_distribution<double>(0.0, 2.0)(random);
    }
    std::string value = text.str();
    if (shape == 2 && value.size() > 1 && value[0] == '0') value = value.substr(1);  // ".123"
    if (shape == 3) value += "000";
    expect_paths_agree(file, "1\t1\t.\tA\tG\t.\t.\t.\tDS\t" + value, value_idx + 1, tally);
  }
  EXPECT_GT(tally.fast, 19000);
}

// ---- random lines ---------------------------------------------------------

// A random header (which FORMAT tags, of which types) and random lines:
// mostly well-formed, with missing values, haploid and polyploid calls,
// multi-allelic sites, any FORMAT order, omitted trailing fields, and a
// share of defects (bad numbers, stray characters, wrong counts).
class LineGenerator {
 public:
  explicit LineGenerator(std::uint64_t seed) : random_(seed) {}

  std::string header(int sample_count) const {
    std::string text =
        "##fileformat=VCFv4.3\n##contig=<ID=1>\n##contig=<ID=2>\n"
        "##FILTER=<ID=q10,Description=\"low\">\n"
        "##INFO=<ID=AF,Number=A,Type=Float,Description=\"f\">\n"
        "##INFO=<ID=NS,Number=1,Type=Integer,Description=\"n\">\n"
        "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"g\">\n"
        "##FORMAT=<ID=DS,Number=A,Type=Float,Description=\"d\">\n"
        "##FORMAT=<ID=GP,Number=G,Type=Float,Description=\"p\">\n"
        "##FORMAT=<ID=AD,Number=R,Type=Integer,Description=\"a\">\n"
        "##FORMAT=<ID=GQ,Number=1,Type=Integer,Description=\"q\">\n"
        "##FORMAT=<ID=FT,Number=1,Type=String,Description=\"t\">\n"
        "##FORMAT=<ID=XF,Number=.,Type=Float,Description=\"x\">\n"
        "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT";
    for (int sample_idx = 0; sample_idx < sample_count; ++sample_idx) text += "\tS" + std::to_string(sample_idx + 1);
    return text + "\n";
  }

  std::string line(int sample_count) {
    const int alt_count = chance(0.7) ? 1 : 2 + pick(2);
    const int allele_count = alt_count + 1;
    std::vector<std::string> keys = {"GT", "DS", "GP", "AD", "GQ", "FT", "XF"};
    std::shuffle(keys.begin(), keys.end(), random_);
    keys.resize(1 + pick(4));
    if (chance(0.05)) keys.push_back("ZZ");  // undeclared
    std::string text = chance(0.5) ? "1" : "2";
    text += "\t" + std::to_string(1 + pick(100000)) + "\t" + (chance(0.5) ? "." : "rs" + std::to_string(pick(999)));
    text += "\tA\t";
    const char* bases[] = {"C", "G", "T", "CA", "<DEL>", "*"};
    for (int allele = 1; allele <= alt_count; ++allele) text += std::string(allele > 1 ? "," : "") + bases[pick(6)];
    text += std::string("\t") + (chance(0.8) ? "." : "30") + "\t" + (chance(0.5) ? "PASS" : chance(0.5) ? "." : "q10");
    text += std::string("\t") + (chance(0.6) ? "." : chance(0.5) ? "NS=3" : "AF=0.5;NS=2");
    text += "\t";
    for (std::size_t key_idx = 0; key_idx < keys.size(); ++key_idx) text += (key_idx ? ":" : "") + keys[key_idx];
    for (int sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
      text += "\t";
      std::size_t written = keys.size();
      if (chance(0.1)) written = pick(static_cast<int>(keys.size())) + 1;  // omit trailing fields
      for (std::size_t key_idx = 0; key_idx < written; ++key_idx) {
        if (key_idx) text += ":";
        text += value_for(keys[key_idx], allele_count);
      }
    }
    if (chance(0.01)) text += "\t";
    if (chance(0.01)) text += "\r";
    return text;
  }

 private:
  bool chance(double probability) { return std::uniform_real_distribution<double>(0, 1)(random_) < probability; }
  int pick(int count) { return static_cast<int>(random_() % static_cast<std::uint64_t>(count)); }

  std::string number(double low, double high) {
    if (chance(0.003)) return defect();
    std::ostringstream text;
    text << std::setprecision(pick(8)) << std::fixed << std::uniform_real_distribution<double>(low, high)(random_);
    return text.str();
  }
  std::string defect() {
    const char* defects[] = {"abc", "", " 1", "1e0", "nan", "-0", "1.5.2", "+1", "0x1", ".5.", "1,", "Inf"};
    return defects[pick(12)];
  }
  std::string list(int count, const std::function<std::string()>& item) {
    std::string text;
    for (int item_idx = 0; item_idx < count; ++item_idx) text += (item_idx ? "," : "") + item();
    return text;
  }
  std::string value_for(const std::string& key, int allele_count) {
    if (chance(0.08)) return ".";
    if (key == "GT") {
      const int ploidy = chance(0.1) ? 1 : chance(0.05) ? 3 : 2;
      std::string call;
      for (int copy_idx = 0; copy_idx < ploidy; ++copy_idx) {
        if (copy_idx) call += chance(0.5) ? "/" : "|";
        call += chance(0.05) ? "." : std::to_string(pick(allele_count + (chance(0.003) ? 2 : 0)));
      }
      return chance(0.003) ? call + "x" : call;
    }
    const int count_error = chance(0.005) ? 1 : 0;
    if (key == "DS") return list(allele_count - 1 + count_error, [&] { return number(0.0, 2.0002); });
    if (key == "GP") {
      const int genotypes = chance(0.1) ? allele_count : allele_count * (allele_count + 1) / 2;
      return list(genotypes + count_error, [&] { return number(0.0, 1.0); });
    }
    if (key == "AD") return list(allele_count, [&] { return std::to_string(pick(50)); });
    if (key == "GQ") return chance(0.005) ? defect() : std::to_string(pick(100) - 5);
    if (key == "FT") return chance(0.5) ? "PASS" : "a,b";
    if (key == "XF") return list(1 + pick(3), [&] { return number(-5.0, 5.0); });
    return "1";
  }

  std::mt19937_64 random_;
};

TEST(FastVcfDecoding, RandomLinesAgreeWithHtslib) {
  for (std::uint64_t seed : {1u, 2u, 3u}) {
    LineGenerator generator(seed);
    const int sample_count = 1 + static_cast<int>(seed) * 3;
    const std::string header = generator.header(sample_count);
    for (DosageField field : {DosageField::ds, DosageField::gp, DosageField::gt}) {
      SCOPED_TRACE("seed " + std::to_string(seed) + " " + dosage_field_name(field));
      auto file = genotype_detail::make_text_file_info(header, "random.vcf", field, 1 + (seed % 2 == 0));
      Tally tally;
      for (int line_idx = 0; line_idx < 4000; ++line_idx) {
        expect_paths_agree(file, generator.line(sample_count), line_idx + 1, tally);
        if (::testing::Test::HasFailure()) return;  // one broken line is enough to read
      }
      std::cout << "seed " << seed << " " << dosage_field_name(field) << ": " << tally.fast << " fast, "
                << tally.general << " through htslib's parser, " << tally.errors << " errors\n";
      // Most lines hold nothing unusual; the specialised decoder must take them.
      EXPECT_GT(tally.fast, tally.general / 2);
      EXPECT_GT(tally.errors, 0);
    }
  }
}

// ---- whole files: VCF text against BCF records -----------------------------

// The random generator's well-formed lines, sorted, as VCF.gz and as BCF
// (bcftools 1.16 view -Ob): the reader's text path (VCF.gz) and its htslib
// record path (BCF) must give identical blocks at 1 and 2 threads.
TEST(FastVcfDecoding, VcfTextAndBcfFilesDecodeIdentically) {
  const std::string dir = testing::make_temp_dir("genotypes_fast_files");
  LineGenerator generator(99);
  const int sample_count = 6;
  const std::string header = generator.header(sample_count);
  auto file = genotype_detail::make_text_file_info(header, "probe.vcf", DosageField::ds);
  std::vector<std::pair<long, std::string>> kept;
  for (int line_idx = 0; kept.size() < 1500 && line_idx < 100000; ++line_idx) {
    std::string line = generator.line(sample_count);
    if (line.rfind("1\t", 0) != 0) continue;  // one contig keeps the sort simple
    const Decoded decoded = decode_line(file, line, 1, DecodeMode::automatic);
    if (decoded.error || line.find("ZZ") != std::string::npos) continue;
    const long position = std::stol(line.substr(2, line.find('\t', 2) - 2));
    kept.emplace_back(position, line);
  }
  std::stable_sort(kept.begin(), kept.end(), [](const auto& a, const auto& b) { return a.first < b.first; });
  std::string text = header;
  for (const auto& entry : kept) text += entry.second + "\n";
  const std::string vcf = dir + "/random.vcf";
  testing::write_text_file(vcf, text);
  ASSERT_EQ(testing::run_command("bgzip -c '" + vcf + "' > '" + vcf + ".gz' && bcftools view -Ob -o '" + dir +
                                 "/random.bcf' '" + vcf + "' 2>/dev/null"),
            0);
  auto read_file = [&](const std::string& path, int io_threads) {
    GenotypeReaderOptions options;
    options.paths = {path};
    options.field = DosageField::ds;
    options.io_threads = io_threads;
    GenotypeReader reader(options);
    DosageBlock block;
    RecordBatch batch;
    while (reader.read_batch(batch, 37) > 0) batch.decode(block);
    return block;
  };
  const DosageBlock from_bcf = read_file(dir + "/random.bcf", 0);
  ASSERT_GT(from_bcf.size(), 1500u);
  EXPECT_EQ(first_difference(read_file(vcf + ".gz", 0), from_bcf), "");
  EXPECT_EQ(first_difference(read_file(vcf + ".gz", 2), from_bcf), "");
  EXPECT_EQ(first_difference(read_file(vcf, 0), from_bcf), "");
}

}  // namespace
}  // namespace tamis
