// Variant IDs in the results: the rsid column is filled from a VCF ID that
// looks like an rsID (a fixture whose IDs are invented), and the simulated
// cohort's IDs follow a scheme of our own, so its rsid column reads #NA.
#include <gtest/gtest.h>

#include <regex>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

std::string scan_command(const std::string& genotypes, const std::string& traits, const std::string& trait,
                         const std::string& out, int threads) {
  return tamis_binary() + " scan --genotypes " + genotypes + " --traits " + traits + " --trait " + trait +
         " --quiet --threads " + std::to_string(threads) + " --out " + out;
}

TEST(VariantIds, RsidColumnIsFilledFromRsLikeIdsOnly) {
  const std::string dir = make_temp_dir("variant_ids_fixture");
  write_text_file(dir + "/traits.tsv",
                  "participant\tlung\nS01\t3.1\nS02\t2.9\nS03\t3.6\nS04\t4.0\nS05\t3.3\nS06\t2.7\n"
                  "S07\t3.8\nS08\t3.0\nS09\t3.4\nS10\t3.9\nS11\t2.8\nS12\t3.5\n");
  const std::string vcf = source_dir() + "/test_data/genotypes_invented_rsids.vcf";
  ASSERT_EQ(run_command(scan_command(vcf, dir + "/traits.tsv", "lung", dir + "/one", 1)), 0);
  ASSERT_EQ(run_command(scan_command(vcf, dir + "/traits.tsv", "lung", dir + "/four", 4)), 0);
  const std::string results = read_gzip_file(dir + "/one.lung.tsv.gz");
  EXPECT_EQ(results, read_gzip_file(dir + "/four.lung.tsv.gz"));

  const auto rows = data_rows(results);
  ASSERT_EQ(rows.size(), 5u);
  ASSERT_EQ(split_fields(lines_of(results).at(0)).at(9), "rsid");
  // VCF ID column of the fixture: rs + digits, ".", our own scheme, rs + digits + a letter, rs + digits.
  EXPECT_EQ(rows[0][9], "rs900000000001");
  EXPECT_EQ(rows[1][9], "#NA");
  EXPECT_EQ(rows[2][9], "#NA");
  EXPECT_EQ(rows[3][9], "#NA");
  EXPECT_EQ(rows[4][9], "rs900000000005");
}

TEST(VariantIds, SimulatedIdsAreInventedAndLeaveRsidEmpty) {
  const std::string dir = make_temp_dir("variant_ids_simulated");
  ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir + "/cohort --samples 200 --variants 300 --seed 5 " +
                        ">/dev/null"),
            0);
  const std::regex invented("saltmarsh_v[0-9]{6}");
  int named = 0;
  for (const std::string& line : lines_of(read_gzip_file(dir + "/cohort.vcf.gz"))) {
    if (line.empty() || line[0] == '#') continue;
    const std::string id = split_fields(line).at(2);
    if (id == ".") continue;
    EXPECT_TRUE(std::regex_match(id, invented)) << id;
    ++named;
  }
  EXPECT_GT(named, 100);  // about 70% of the 300 records carry an ID

  ASSERT_EQ(run_command(scan_command(dir + "/cohort.vcf.gz", dir + "/cohort.traits.tsv", "fev1_litres",
                                     dir + "/scan", 2)),
            0);
  const auto rows = data_rows(read_gzip_file(dir + "/scan.fev1_litres.tsv.gz"));
  ASSERT_GT(rows.size(), 100u);
  for (const auto& row : rows) EXPECT_EQ(row.at(9), "#NA") << row.at(8);
}

}  // namespace
}  // namespace tamis::testing
