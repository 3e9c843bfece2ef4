// The progress display: one redrawn line on a terminal, plain log lines and
// no carriage returns otherwise, nothing with --quiet.
#include <gtest/gtest.h>

#include "scan/progress.hpp"
#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

class Progress : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("progress");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 2000 --variants 4000 --seed 12 2>/dev/null"),
              0);
  }
  static std::string scan(const std::string& name, const std::string& extra = "") {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,pc1 --threads 1" +
           " --checkpoint-blocks 1000 --out " + dir_ + "/" + name + " " + extra;
  }
  static std::string dir_;
};
std::string Progress::dir_;

TEST_F(Progress, TerminalShowsARedrawnLine) {
  // script(1) from util-linux runs the scan under a pseudo-terminal.
  const std::string command = "script -qfec \"" + scan("tty") + "\" /dev/null";
  const std::string screen = capture_command(command);
  EXPECT_NE(screen.find("\rprogress: "), std::string::npos) << screen;
  EXPECT_NE(screen.find(" records of 4000 ("), std::string::npos) << "the index gives the total";
  EXPECT_NE(screen.find("records/s, elapsed "), std::string::npos);
}

TEST_F(Progress, RedirectedStderrHasNoCarriageReturns) {
  ASSERT_EQ(run_command(scan("file") + " 2> " + dir_ + "/stderr.txt"), 0);
  const std::string text = read_text_file(dir_ + "/stderr.txt");
  EXPECT_FALSE(text.empty());
  EXPECT_EQ(text.find('\r'), std::string::npos);
}

TEST_F(Progress, QuietPrintsNothing) {
  ASSERT_EQ(run_command("script -qfec \"" + scan("quiet", "--quiet") + "\" /dev/null > " + dir_ + "/screen.txt"), 0);
  EXPECT_EQ(read_text_file(dir_ + "/screen.txt").find("progress:"), std::string::npos);
}

TEST(ProgressText, GivesShareRateElapsedAndRemaining) {
  const std::string text = ProgressDisplay::describe(2500, 10000, 50.0);
  EXPECT_EQ(text, "progress: 2500 records of 10000 (25.0%), 50 records/s, elapsed 0:50, about 2:30 left");
  EXPECT_EQ(ProgressDisplay::describe(7, std::nullopt, 3725.0), "progress: 7 records, 0 records/s, elapsed 1:02:05");
}

}  // namespace
}  // namespace tamis::testing
