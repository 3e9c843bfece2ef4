// `tamis confirm` refits chosen variants exactly as the scan confirms them,
// reading only their records through the index.
#include <gtest/gtest.h>

#include <algorithm>
#include <sstream>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

std::string confirmed_rows(const std::string& text) {
  const std::vector<std::string> lines = lines_of(text);
  std::string kept = lines.at(0) + "\n";
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
    if (split_fields(lines[line_idx]).at(13).rfind("score", 0) != 0) kept += lines[line_idx] + "\n";
  }
  return kept;
}

class Confirm : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("confirm");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 800 --variants 1500 --seed 44 2>/dev/null"),
              0);
  }
  static std::string inputs() {
    return " --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2 --quiet";
  }
  static std::string dir_;
};
std::string Confirm::dir_;

TEST_F(Confirm, ReproducesTheScansConfirmedRows) {
  ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + " --confirm-below 1e-3 --out " + dir_ + "/full"), 0);
  ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + " --confirm-below 0 --out " + dir_ + "/screen"), 0);
  ASSERT_EQ(run_command(tamis_binary() + " confirm" + inputs() + " --from-results " + dir_ +
                        "/screen.fev1_litres.tsv.gz " + dir_ + "/screen.winter_wheeze.tsv.gz --below 1e-3 --out " +
                        dir_ + "/refit"),
            0);
  for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
    const std::string expected = confirmed_rows(read_gzip_file(dir_ + "/full." + trait + ".tsv.gz"));
    const std::string refit = read_gzip_file(dir_ + "/refit." + trait + ".tsv.gz");
    EXPECT_GT(std::count(expected.begin(), expected.end(), '\n'), 2) << trait;
    EXPECT_EQ(refit, expected) << trait;
  }
  EXPECT_NE(read_text_file(dir_ + "/refit.log").find("through the index"), std::string::npos);
}

TEST_F(Confirm, TakesAPositionalVariantList) {
  ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + " --confirm-below 1 --out " + dir_ + "/every"), 0);
  const std::string rows = read_gzip_file(dir_ + "/every.fev1_litres.tsv.gz");
  // The third data row, as chr:pos:ref:alt.
  const std::string line = lines_of(rows).at(3);
  const std::vector<std::string> fields = split_fields(line);
  write_text_file(dir_ + "/list.txt", fields[0] + ":" + fields[1] + ":" + fields[3] + ":" + fields[2] + "\n");
  ASSERT_EQ(run_command(tamis_binary() + " confirm" + inputs() + " --variants " + dir_ + "/list.txt --out " + dir_ +
                        "/listed"),
            0);
  const std::string listed = read_gzip_file(dir_ + "/listed.fev1_litres.tsv.gz");
  EXPECT_NE(listed.find(line + "\n"), std::string::npos) << listed;
  EXPECT_EQ(std::count(listed.begin(), listed.end(), '\n'), 2);
}

TEST_F(Confirm, NothingToConfirmIsAUsageError) {
  int code = 0;
  const std::string message = capture_command(tamis_binary() + " confirm" + inputs() + " --out " + dir_ + "/none 2>&1", &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(message.find("nothing to confirm"), std::string::npos);
}

}  // namespace
}  // namespace tamis::testing
