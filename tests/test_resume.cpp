// Kill-and-resume: a scan killed at any point and continued with --resume
// gives files byte-identical to an uninterrupted run.
#include <gtest/gtest.h>
#include <signal.h>
#include <unistd.h>

#include <chrono>
#include <thread>

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
    const auto start = std::chrono::steady_clock::now();
    ASSERT_EQ(run_command(scan_command(dir_ + "/whole")), 0);
    whole_ms_ = static_cast<int>(
        std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - start).count());
  }
  // A delay that lands the kill `share` of the way through a whole run.
  static int kill_delay(double share) { return static_cast<int>(share * whole_ms_); }
  static std::string scan_command(const std::string& prefix, const std::string& extra = "") {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,village,pc1,pc2 " +
           "--threads 2 --quiet --checkpoint-blocks 2 --out " + prefix + " " + extra;
  }
  // Starts the scan in the background and kills it after `delay_ms`.
  static void run_and_kill(const std::string& prefix, int delay_ms, int signal_number) {
    pid_t child = fork();
    ASSERT_GE(child, 0);
    if (child == 0) {
      execl("/bin/sh", "sh", "-c", ("exec " + scan_command(prefix) + " 2>/dev/null").c_str(), nullptr);
      _exit(127);
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(delay_ms));
    kill(child, signal_number);
    int status = 0;
    waitpid(child, &status, 0);
  }
  static std::string dir_;
  static int whole_ms_;
};
std::string Resume::dir_;
int Resume::whole_ms_ = 0;

void expect_same_as_whole(const std::string& dir, const std::string& prefix) {
  for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
    for (const std::string suffix : {".tsv.gz", ".tsv.gz.tbi"}) {
      EXPECT_TRUE(read_text_file(dir + "/whole." + trait + suffix) == read_text_file(prefix + "." + trait + suffix))
          << prefix << "." << trait << suffix;
    }
  }
}

TEST_F(Resume, KilledScansResumeToIdenticalFiles) {
  int kill_idx = 0;
  for (double share : {0.1, 0.35, 0.6, 0.85}) {
    const std::string prefix = dir_ + "/killed" + std::to_string(kill_idx++);
    run_and_kill(prefix, kill_delay(share), SIGKILL);
    // Final names appear only once the checkpoint is gone (on a loaded
    // machine the run may even finish before the kill lands).
    if (file_exists(prefix + ".resume")) {
      EXPECT_FALSE(file_exists(prefix + ".fev1_litres.tsv.gz")) << "a killed run leaves no final file";
      EXPECT_FALSE(file_exists(prefix + ".winter_wheeze.tsv.gz"));
    }
    ASSERT_EQ(run_command(scan_command(prefix, "--resume")), 0);
    expect_same_as_whole(dir_, prefix);
    EXPECT_FALSE(file_exists(prefix + ".resume")) << "the checkpoint is removed once the run completes";
  }
}

TEST_F(Resume, TerminatedScanKeepsItsCheckpoint) {
  const std::string prefix = dir_ + "/terminated";
  run_and_kill(prefix, kill_delay(0.5), SIGTERM);
  EXPECT_FALSE(file_exists(prefix + ".winter_wheeze.tsv.gz"));
  ASSERT_EQ(run_command(scan_command(prefix, "--resume")), 0);
  expect_same_as_whole(dir_, prefix);
}

TEST_F(Resume, ResumeWithOtherOptionsIsRefused) {
  const std::string prefix = dir_ + "/refused";
  run_and_kill(prefix, kill_delay(0.6), SIGKILL);
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
