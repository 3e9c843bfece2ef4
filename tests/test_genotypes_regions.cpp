// Genotype reader: region text, reading through .tbi/.csi indexes with POS
// semantics, and shard plans that split the genome by record count.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <functional>
#include <iostream>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis {
namespace {

using testing::capture_command;
using testing::make_temp_dir;
using testing::run_command;

constexpr std::int64_t end_of_contig = std::numeric_limits<std::int64_t>::max();

// One record as both sides report it: CHROM, POS and the (unique) ID.
struct RecordKey {
  std::string chromosome;
  std::int64_t position = 0;
  std::string id;
  bool operator==(const RecordKey& other) const {
    return chromosome == other.chromosome && position == other.position && id == other.id;
  }
};

std::ostream& operator<<(std::ostream& stream, const RecordKey& key) {
  return stream << key.chromosome << ":" << key.position << " " << key.id;
}

// Deterministic test data: SNVs and 8-base deletions (every 13th record) on
// contigs 1, 2 and X, with gaps of 1 to `max_gap` bases; contig 3 is declared
// but holds nothing. Every record has one ALT allele, so a site is a record.
struct FixtureShape {
  int records_per_contig = 400;
  int samples = 4;
  int max_gap = 3000;
};

std::string write_fixture(const std::string& dir, const std::string& name, const FixtureShape& shape,
                          const std::vector<std::string>& contigs = {"1", "2", "X"}) {
  std::ostringstream text;
  text << "##fileformat=VCFv4.3\n";
  for (const char* contig : {"1", "2", "3", "X"}) text << "##contig=<ID=" << contig << ">\n";
  text << "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"Genotype\">\n"
       << "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT";
  for (int sample_idx = 0; sample_idx < shape.samples; ++sample_idx) text << "\tS" << sample_idx + 1;
  text << "\n";
  unsigned state = 20240917u;
  auto next_random = [&state] {
    state = state * 1664525u + 1013904223u;
    return state >> 8;
  };
  const char* calls[] = {"0/0", "0/1", "1/1", "./."};
  int serial = 0;
  for (const std::string& contig : contigs) {
    std::int64_t position = 1 + next_random() % 100;
    for (int record_idx = 0; record_idx < shape.records_per_contig; ++record_idx) {
      const bool deletion = ++serial % 13 == 0;
      text << contig << "\t" << position << "\tv" << serial << "\t" << (deletion ? "ACGTACGT" : "A")
           << "\t" << (deletion ? "A" : "G") << "\t.\tPASS\t.\tGT";
      for (int sample_idx = 0; sample_idx < shape.samples; ++sample_idx) {
        text << "\t" << calls[next_random() % 4];
      }
      text << "\n";
      // Dense and sparse stretches, so that index windows differ in size.
      const bool sparse = (record_idx / 50) % 2 == 1;
      position += 1 + next_random() % (sparse ? shape.max_gap * 4 : shape.max_gap / 4 + 1);
    }
  }
  const std::string path = dir + "/" + name + ".vcf";
  testing::write_text_file(path, text.str());
  return path;
}

struct IndexedCopies {
  std::string vcf_gz, bcf;
};

// bgzip + tabix 1.16 -p vcf, and bcftools 1.16 view -Ob + index (.csi).
IndexedCopies make_indexed_copies(const std::string& vcf) {
  const std::string stem = vcf.substr(0, vcf.size() - 4);
  IndexedCopies copies{stem + ".vcf.gz", stem + ".bcf"};
  EXPECT_EQ(run_command("bgzip -c '" + vcf + "' > '" + copies.vcf_gz + "' && tabix -f -p vcf '" +
                        copies.vcf_gz + "'"),
            0);
  EXPECT_EQ(run_command("bcftools view -Ob -o '" + copies.bcf + "' '" + vcf +
                        "' 2>/dev/null && bcftools index -f '" + copies.bcf + "'"),
            0);
  return copies;
}

std::vector<RecordKey> read_keys(const GenotypeReaderOptions& options) {
  GenotypeReader reader(options);
  std::vector<RecordKey> keys;
  RecordBatch batch;
  while (reader.read_batch(batch, 7) > 0) {
    DosageBlock block;
    batch.decode(block);
    for (const VariantSite& site : block.sites) {
      if (site.allele_index == 1) keys.push_back(RecordKey{site.chromosome, site.position, site.id});
    }
  }
  return keys;
}

std::vector<RecordKey> read_regions(const std::vector<std::string>& paths,
                                    const std::vector<GenomicRegion>& regions, int io_threads = 0) {
  GenotypeReaderOptions options;
  options.paths = paths;
  options.regions = regions;
  options.io_threads = io_threads;
  return read_keys(options);
}

std::vector<RecordKey> read_everything(const std::vector<std::string>& paths) {
  GenotypeReaderOptions options;
  options.paths = paths;
  return read_keys(options);
}

std::vector<RecordKey> parse_keys(const std::string& text) {
  std::vector<RecordKey> keys;
  std::istringstream lines(text);
  for (std::string line; std::getline(lines, line);) {
    std::istringstream cells(line);
    RecordKey key;
    cells >> key.chromosome >> key.position >> key.id;
    keys.push_back(key);
  }
  return keys;
}

// bcftools 1.16 query with POS semantics (--regions-overlap 0: "Include if
// POS in the region"), one call per contig, in the order the contigs first
// appear in `region_texts` (the order tamis documents for its regions).
std::vector<RecordKey> bcftools_keys(const std::string& path,
                                     const std::vector<std::string>& region_texts) {
  std::vector<std::string> contig_order;
  std::vector<std::string> joined;
  for (const std::string& text : region_texts) {
    const std::string contig = parse_region(text).contig;
    auto found = std::find(contig_order.begin(), contig_order.end(), contig);
    if (found == contig_order.end()) {
      contig_order.push_back(contig);
      joined.push_back(text);
    } else {
      joined[found - contig_order.begin()] += "," + text;
    }
  }
  std::vector<RecordKey> keys;
  for (const std::string& regions : joined) {
    std::vector<RecordKey> part = parse_keys(capture_command(
        "bcftools query --regions-overlap 0 -r '" + regions + "' -f '%CHROM\\t%POS\\t%ID\\n' '" + path +
        "' 2>/dev/null"));
    keys.insert(keys.end(), part.begin(), part.end());
  }
  return keys;
}

std::vector<GenomicRegion> parse_all(const std::vector<std::string>& texts) {
  std::vector<GenomicRegion> regions;
  for (const std::string& text : texts) regions.push_back(parse_region(text));
  return regions;
}

void expect_error(const std::function<void()>& action, ExitCode code,
                  const std::vector<std::string>& fragments) {
  try {
    action();
    ADD_FAILURE() << "expected a tamis::Error";
  } catch (const Error& error) {
    EXPECT_EQ(error.code(), code) << error.what();
    for (const std::string& fragment : fragments) {
      EXPECT_NE(std::string(error.what()).find(fragment), std::string::npos)
          << "missing '" << fragment << "' in: " << error.what();
    }
    EXPECT_FALSE(error.fix().empty()) << error.what();
  }
}

std::vector<std::vector<RecordKey>> read_shards(const std::vector<std::string>& paths, int shard_count);

// ---- region text -------------------------------------------------------------

TEST(GenomicRegions, ParsesEveryForm) {
  GenomicRegion whole = parse_region("chr2");
  EXPECT_EQ(whole.contig, "chr2");
  EXPECT_EQ(whole.first, 1);
  EXPECT_EQ(whole.last, end_of_contig);

  GenomicRegion span = parse_region("chr2:1,000,000-2,000,000");
  EXPECT_EQ(span.contig, "chr2");
  EXPECT_EQ(span.first, 1000000);
  EXPECT_EQ(span.last, 2000000);

  GenomicRegion single = parse_region("X:500");
  EXPECT_EQ(single.first, 500);
  EXPECT_EQ(single.last, 500);

  GenomicRegion open_end = parse_region("X:500-");
  EXPECT_EQ(open_end.first, 500);
  EXPECT_EQ(open_end.last, end_of_contig);

  // The contig is everything before the last ':' (GRCh38 has HLA contigs
  // such as "HLA-A*01:01:01:01", recalled from memory).
  GenomicRegion colon_name = parse_region("HLA-A*01:01:100-200");
  EXPECT_EQ(colon_name.contig, "HLA-A*01:01");
  EXPECT_EQ(colon_name.first, 100);
  EXPECT_EQ(colon_name.last, 200);
}

TEST(GenomicRegions, MalformedTextIsAUsageError) {
  for (const std::string text : {"", ":5-10", "chr1:", "chr1:0-5", "chr1:9-5", "chr1:5x", "chr1:-5",
                                 "chr1:1-2-3", "chr1:,5", "chr1:99999999999999999999", "chr 1:5"}) {
    SCOPED_TRACE(text);
    expect_error([&] { parse_region(text); }, ExitCode::usage, {"region '" + text + "'"});
  }
}

// ---- reading regions -------------------------------------------------------

class RegionReading : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = make_temp_dir("genotypes_regions");
    copies_ = make_indexed_copies(write_fixture(dir_, "regions", FixtureShape{}));
  }
  std::string dir_;
  IndexedCopies copies_;
};

TEST_F(RegionReading, RecordsMatchBcftoolsWithPosSemantics) {
  const std::vector<std::vector<std::string>> region_sets = {
      {"1:100000-300000"},
      {"2"},
      {"1:1-1"},
      {"X:1-50000", "1:250000-"},
      {"2:200000-210000", "2:50000-60000", "1:400000-900000"},
      {"X:123456"}};
  for (const std::string& path : {copies_.vcf_gz, copies_.bcf}) {
    for (const std::vector<std::string>& texts : region_sets) {
      SCOPED_TRACE(path + " " + texts.front());
      const std::vector<RecordKey> expected = bcftools_keys(path, texts);
      const std::vector<RecordKey> found = read_regions({path}, parse_all(texts));
      EXPECT_EQ(found, expected);
      // Most sets select something; a check that compares two empty lists proves little.
      if (texts.front() != "X:123456" && texts.front() != "1:1-1") {
        EXPECT_FALSE(found.empty());
      }
    }
  }
}

TEST_F(RegionReading, OverlappingAndTouchingRegionsGiveEachRecordOnce) {
  const std::vector<std::string> pieces = {"1:100000-200000", "1:150000-250000", "1:250001-300000",
                                           "1:120000-130000"};
  for (const std::string& path : {copies_.vcf_gz, copies_.bcf}) {
    SCOPED_TRACE(path);
    // bcftools 1.16, one region spanning the pieces, POS semantics.
    const std::vector<RecordKey> expected = bcftools_keys(path, {"1:100000-300000"});
    ASSERT_GT(expected.size(), 10u);
    EXPECT_EQ(read_regions({path}, parse_all(pieces)), expected);
  }
}

TEST_F(RegionReading, RecordStartingBeforeTheRegionIsNotRead) {
  // v13 is the first deletion (REF ACGTACGT, 8 bases); a region starting one
  // base after its POS overlaps its REF but does not hold its POS.
  const std::vector<RecordKey> all = read_everything({copies_.vcf_gz});
  auto deletion = std::find_if(all.begin(), all.end(), [](const RecordKey& key) { return key.id == "v13"; });
  ASSERT_NE(deletion, all.end());
  const std::string region =
      deletion->chromosome + ":" + std::to_string(deletion->position + 1) + "-" +
      std::to_string(deletion->position + 200000);
  for (const std::string& path : {copies_.vcf_gz, copies_.bcf}) {
    SCOPED_TRACE(path);
    // bcftools 1.16 -r with its default --regions-overlap 1 (record overlaps) reports v13 ...
    const std::string overlapping =
        capture_command("bcftools query -r '" + region + "' -f '%ID\\n' '" + path + "' 2>/dev/null");
    EXPECT_EQ(overlapping.substr(0, 4), "v13\n");
    // ... tamis, like --regions-overlap 0, does not.
    const std::vector<RecordKey> found = read_regions({path}, {parse_region(region)});
    ASSERT_FALSE(found.empty());
    EXPECT_NE(found.front().id, "v13");
    EXPECT_EQ(found, bcftools_keys(path, {region}));
  }
}

TEST_F(RegionReading, ContigsTheFileLacksGiveNothing) {
  for (const std::string& path : {copies_.vcf_gz, copies_.bcf}) {
    SCOPED_TRACE(path);
    EXPECT_TRUE(read_regions({path}, parse_all({"7:1-1000"})).empty());  // not in the header
    EXPECT_TRUE(read_regions({path}, parse_all({"3"})).empty());         // declared, no records
    const std::vector<RecordKey> found = read_regions({path}, parse_all({"7", "2:1-100000", "3"}));
    EXPECT_EQ(found, bcftools_keys(path, {"2:1-100000"}));
    EXPECT_FALSE(found.empty());
  }
}

TEST_F(RegionReading, SeveralFilesAndDecompressionThreads) {
  // The same records split by contig over two files (bcftools 1.16 view -r).
  const std::string first = dir_ + "/part1.vcf.gz", second = dir_ + "/part2.bcf";
  ASSERT_EQ(run_command("bcftools view -r 1 -Oz -o '" + first + "' '" + copies_.vcf_gz +
                        "' && tabix -p vcf '" + first + "' && bcftools view -r 2,X -Ob -o '" + second +
                        "' '" + copies_.vcf_gz + "' && bcftools index '" + second + "'"),
            0);
  const std::vector<std::string> texts = {"2:1-150000", "1:200000-400000", "X"};
  std::vector<RecordKey> expected = bcftools_keys(copies_.vcf_gz, {"1:200000-400000"});
  // Files come first, then regions: file 1 holds only contig 1.
  for (const RecordKey& key : bcftools_keys(copies_.vcf_gz, {"2:1-150000", "X"})) expected.push_back(key);
  EXPECT_EQ(read_regions({first, second}, parse_all(texts)), expected);
  EXPECT_EQ(read_regions({first, second}, parse_all(texts), 2), expected);
}

TEST_F(RegionReading, RegionsLeaveDosagesAndCallsUnchanged) {
  GenotypeReaderOptions whole;
  whole.paths = {copies_.bcf};
  GenotypeReaderOptions regional = whole;
  regional.regions = {parse_region("1"), parse_region("2"), parse_region("X")};
  GenotypeReader whole_reader(whole), regional_reader(regional);
  DosageBlock whole_block, regional_block;
  RecordBatch batch;
  while (whole_reader.read_batch(batch, 64) > 0) batch.decode(whole_block);
  while (regional_reader.read_batch(batch, 64) > 0) batch.decode(regional_block);
  ASSERT_EQ(whole_block.size(), 1200u);
  ASSERT_EQ(regional_block.size(), whole_block.size());
  EXPECT_EQ(regional_block.ploidy, whole_block.ploidy);
  EXPECT_EQ(regional_block.diploid_calls, whole_block.diploid_calls);
  ASSERT_EQ(regional_block.dosages.size(), whole_block.dosages.size());
  for (std::size_t value_idx = 0; value_idx < whole_block.dosages.size(); ++value_idx) {
    const double a = whole_block.dosages[value_idx], b = regional_block.dosages[value_idx];
    ASSERT_TRUE((std::isnan(a) && std::isnan(b)) || a == b) << value_idx;
  }
  // Records are numbered within what the regions read; here that is everything.
  EXPECT_EQ(regional_block.sites.back().record_number, 1200u);
}

TEST_F(RegionReading, VcfGzWithACsiIndexIsReadThroughIt) {
  // bcftools 1.16 index writes a .csi for VCF.gz as well; tabix's loader takes it.
  const std::string csi_dir = make_temp_dir("genotypes_regions_csi");
  const std::string path = csi_dir + "/csi_only.vcf.gz";
  ASSERT_EQ(run_command("cp '" + copies_.vcf_gz + "' '" + path + "' && bcftools index '" + path + "'"), 0);
  ASSERT_TRUE(testing::file_exists(path + ".csi"));
  ASSERT_FALSE(testing::file_exists(path + ".tbi"));
  const std::vector<std::string> texts = {"2:100000-400000", "1:5000-"};
  const std::vector<RecordKey> found = read_regions({path}, parse_all(texts));
  EXPECT_EQ(found, bcftools_keys(copies_.vcf_gz, texts));
  EXPECT_FALSE(found.empty());
  std::vector<RecordKey> joined;
  for (const std::vector<RecordKey>& shard : read_shards({path}, 4)) joined.insert(joined.end(), shard.begin(), shard.end());
  EXPECT_EQ(joined, read_everything({path}));
}

TEST_F(RegionReading, RecordCountIsUnknownWithRegions) {
  GenotypeReaderOptions options;
  options.paths = {copies_.vcf_gz};
  EXPECT_EQ(GenotypeReader(options).indexed_record_count(), 1200u);
  options.regions = {parse_region("1")};
  EXPECT_EQ(GenotypeReader(options).indexed_record_count(), std::nullopt);
}

TEST_F(RegionReading, FileWithoutIndexSaysHowToMakeOne) {
  const std::string bare_gz = dir_ + "/bare.vcf.gz", bare_bcf = dir_ + "/bare.bcf";
  ASSERT_EQ(run_command("cp '" + copies_.vcf_gz + "' '" + bare_gz + "' && cp '" + copies_.bcf + "' '" +
                        bare_bcf + "'"),
            0);
  const std::vector<GenomicRegion> regions = {parse_region("1:1-1000")};
  GenotypeReaderOptions options;
  options.regions = regions;
  options.paths = {bare_gz};
  expect_error([&] { GenotypeReader reader(options); }, ExitCode::genotype_input,
               {bare_gz, "index", "tabix -p vcf " + bare_gz});
  options.paths = {bare_bcf};
  expect_error([&] { GenotypeReader reader(options); }, ExitCode::genotype_input,
               {bare_bcf, "bcftools index " + bare_bcf});
  const std::string plain = dir_ + "/regions.vcf";
  options.paths = {plain};
  expect_error([&] { GenotypeReader reader(options); }, ExitCode::genotype_input, {plain, "bgzip"});
}

// ---- shard plans -------------------------------------------------------------

std::vector<std::vector<RecordKey>> read_shards(const std::vector<std::string>& paths, int shard_count) {
  std::vector<std::vector<RecordKey>> shards;
  for (int shard = 1; shard <= shard_count; ++shard) {
    const std::vector<GenomicRegion> regions = plan_shard(paths, shard, shard_count);
    EXPECT_FALSE(regions.empty()) << "shard " << shard << " of " << shard_count;
    if (shard == shard_count && !regions.empty()) {
      EXPECT_EQ(regions.back().last, end_of_contig);
    }
    for (const GenomicRegion& region : regions) EXPECT_LE(region.first, region.last);
    shards.push_back(read_regions(paths, regions));
  }
  return shards;
}

void expect_shards_cover_everything_once(const std::vector<std::string>& paths) {
  const std::vector<RecordKey> everything = read_everything(paths);
  ASSERT_FALSE(everything.empty());
  for (int shard_count : {1, 2, 3, 5, 7, 20}) {
    SCOPED_TRACE(std::to_string(shard_count) + " shards");
    std::vector<RecordKey> joined;
    for (const std::vector<RecordKey>& shard : read_shards(paths, shard_count)) {
      joined.insert(joined.end(), shard.begin(), shard.end());
    }
    // Every record exactly once, in file order then position.
    EXPECT_EQ(joined, everything);
  }
}

TEST_F(RegionReading, ShardsCoverEveryRecordOnceInOrder) {
  for (const std::string& path : {copies_.vcf_gz, copies_.bcf}) {
    SCOPED_TRACE(path);
    expect_shards_cover_everything_once({path});
  }
}

TEST_F(RegionReading, ShardsOfSeveralFilesCoverEveryRecordOnce) {
  const std::string first = dir_ + "/shard_part1.bcf", second = dir_ + "/shard_part2.vcf.gz";
  ASSERT_EQ(run_command("bcftools view -r 1,2 -Ob -o '" + first + "' '" + copies_.vcf_gz +
                        "' && bcftools index '" + first + "' && bcftools view -r X -Oz -o '" + second +
                        "' '" + copies_.vcf_gz + "' && tabix -p vcf '" + second + "'"),
            0);
  expect_shards_cover_everything_once({first, second});
}

TEST_F(RegionReading, TinyFilesStillSplitIntoValidShards) {
  // Four records in one BGZF block, more shards than records.
  const std::string tiny_dir = make_temp_dir("genotypes_regions_tiny");
  const IndexedCopies tiny = make_indexed_copies(write_fixture(tiny_dir, "tiny", FixtureShape{2, 2, 10}, {"2", "X"}));
  for (const std::string& path : {tiny.vcf_gz, tiny.bcf}) {
    SCOPED_TRACE(path);
    expect_shards_cover_everything_once({path});
  }
}

TEST_F(RegionReading, ShardPlansAreDeterministic) {
  for (int shard = 1; shard <= 5; ++shard) {
    const std::vector<GenomicRegion> once = plan_shard({copies_.bcf}, shard, 5);
    const std::vector<GenomicRegion> again = plan_shard({copies_.bcf}, shard, 5);
    ASSERT_EQ(once.size(), again.size());
    for (std::size_t region_idx = 0; region_idx < once.size(); ++region_idx) {
      EXPECT_EQ(once[region_idx].contig, again[region_idx].contig);
      EXPECT_EQ(once[region_idx].first, again[region_idx].first);
      EXPECT_EQ(once[region_idx].last, again[region_idx].last);
    }
  }
}

TEST_F(RegionReading, ShardErrors) {
  expect_error([&] { plan_shard({copies_.bcf}, 0, 3); }, ExitCode::usage, {"shard 0 of 3"});
  expect_error([&] { plan_shard({copies_.bcf}, 4, 3); }, ExitCode::usage, {"shard 4 of 3"});
  const std::string bare = dir_ + "/unindexed.vcf.gz";
  ASSERT_EQ(run_command("cp '" + copies_.vcf_gz + "' '" + bare + "'"), 0);
  expect_error([&] { plan_shard({copies_.bcf, bare}, 1, 3); }, ExitCode::genotype_input,
               {bare, "tabix -p vcf " + bare});
}

// Shard sizes on 30,000 records of 60 samples (many BGZF blocks), where the
// index's byte estimates have something to work with.
TEST(ShardBalance, ShardsHoldNearEqualRecordCounts) {
  const std::string dir = make_temp_dir("genotypes_shard_balance");
  const IndexedCopies copies = make_indexed_copies(write_fixture(dir, "balance", FixtureShape{10000, 60, 400}));
  for (const std::string& path : {copies.vcf_gz, copies.bcf}) {
    for (int shard_count : {4, 10, 25}) {
      std::vector<std::size_t> sizes;
      for (const std::vector<RecordKey>& shard : read_shards({path}, shard_count)) sizes.push_back(shard.size());
      const double mean = 30000.0 / shard_count;
      const auto [smallest, largest] = std::minmax_element(sizes.begin(), sizes.end());
      const double spread = static_cast<double>(*largest - *smallest) / mean;
      std::cout << path.substr(path.rfind('.')) << " " << shard_count << " shards: smallest " << *smallest
                << ", largest " << *largest << ", spread " << spread * 100 << "% of the mean\n";
      // Within 10% of the mean either way.
      EXPECT_GT(*smallest, mean * 0.9);
      EXPECT_LT(*largest, mean * 1.1);
    }
  }
}

}  // namespace
}  // namespace tamis
