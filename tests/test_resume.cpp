// Kill-and-resume: a scan killed at any point and continued with --resume
// gives files byte-identical to an uninterrupted run. The scan interrupts
// itself after a chosen block (TAMIS_TEST_SIGNAL_AFTER_BLOCK), so the test
// is the same on a fast machine and a slow one.
#include <gtest/gtest.h>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

class Resume : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("resume");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 2000 --variants 8000 --seed 21 2>/dev/null"),
              0);
    ASSERT_EQ(run_command(scan_command(dir_ + "/whole")), 0);
  }
  static std::string scan_command(const std::string& prefix, const std::string& extra = "") {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2 " +
           "--threads 2 --quiet --checkpoint-blocks 2 --out " + prefix + " " + extra;
  }
  // Runs the scan until `blocks` blocks are written, when it sends itself
  // `signal_name` (KILL or TERM); returns the exit status.
  static int run_and_interrupt(const std::string& prefix, int blocks, const std::string& signal_name) {
    return run_command("TAMIS_TEST_SIGNAL_AFTER_BLOCK=" + std::to_string(blocks) + ":" + signal_name + " " +
                       scan_command(prefix) + " 2>/dev/null");
  }
  static std::string dir_;
};
std::string Resume::dir_;

void expect_same_as_whole(const std::string& dir, const std::string& prefix) {
  for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
    for (const std::string suffix : {".tsv.gz", ".tsv.gz.tbi"}) {
      EXPECT_TRUE(read_text_file(dir + "/whole." + trait + suffix) == read_text_file(prefix + "." + trait + suffix))
          << prefix << "." << trait << suffix;
    }
  }
}

TEST_F(Resume, KilledScansResumeToIdenticalFiles) {
  // 8000 records in blocks of 64 make 125 blocks; checkpoints come every
  // 2 blocks, so odd counts stop between checkpoints.
  for (int blocks : {3, 40, 77, 124}) {
    const std::string prefix = dir_ + "/killed" + std::to_string(blocks);
    EXPECT_EQ(run_and_interrupt(prefix, blocks, "KILL"), 137) << "128 + SIGKILL (9), as the shell reports it";
    EXPECT_TRUE(file_exists(prefix + ".resume"));
    EXPECT_FALSE(file_exists(prefix + ".fev1_litres.tsv.gz")) << "a killed run leaves no final file";
    EXPECT_FALSE(file_exists(prefix + ".winter_wheeze.tsv.gz"));
    ASSERT_EQ(run_command(scan_command(prefix, "--resume")), 0);
    expect_same_as_whole(dir_, prefix);
    EXPECT_FALSE(file_exists(prefix + ".resume")) << "the checkpoint is removed once the run completes";
  }
}

TEST_F(Resume, TerminatedScanKeepsItsCheckpoint) {
  const std::string prefix = dir_ + "/terminated";
  EXPECT_EQ(run_and_interrupt(prefix, 60, "TERM"), 143) << "128 + SIGTERM (15), the shell's convention";
  EXPECT_TRUE(file_exists(prefix + ".resume"));
  EXPECT_FALSE(file_exists(prefix + ".winter_wheeze.tsv.gz"));
  ASSERT_EQ(run_command(scan_command(prefix, "--resume")), 0);
  expect_same_as_whole(dir_, prefix);
}

TEST_F(Resume, ResumeWithOtherOptionsIsRefused) {
  const std::string prefix = dir_ + "/refused";
  EXPECT_EQ(run_and_interrupt(prefix, 75, "KILL"), 137);
  ASSERT_TRUE(file_exists(prefix + ".resume")) << "the kill came after the first checkpoint";
  int code = 0;
  const std::string message = capture_command(scan_command(prefix, "--resume --confirm-below 0.01") + " 2>&1", &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(message.find("--resume refused"), std::string::npos) << message;
  EXPECT_NE(message.find("confirm_below"), std::string::npos) << message;
  EXPECT_FALSE(file_exists(prefix + ".fev1_litres.tsv.gz"));
}

}  // namespace
}  // namespace tamis::testing
