// The progress display: one redrawn line on a terminal, ending in a final
// line however short the scan; plain log lines and no carriage returns
// otherwise, nothing with --quiet. Time is stepped by the tests, never
// waited for.
#include <gtest/gtest.h>

#include <cstdio>

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

TEST_F(Progress, TerminalEndsWithAFinalProgressLine) {
  // script(1) from util-linux runs the scan under a pseudo-terminal. However
  // quickly the scan ends, its last progress line counts every record.
  const std::string command = "script -qfec \"" + scan("tty") + "\" /dev/null";
  const std::string screen = capture_command(command);
  EXPECT_NE(screen.find("\rprogress: 4000 records of 4000 (100.0%), "), std::string::npos)
      << "the index gives the total\n" << screen;
  EXPECT_NE(screen.find("records/s, elapsed "), std::string::npos);
  EXPECT_LT(screen.find("progress: 4000 records"), screen.find("read 4000 records"))
      << "the final line comes before the summary";
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

// A clock that moves only when the test says so.
struct SteppedClock {
  std::chrono::steady_clock::time_point now{};
  ProgressClock clock() {
    return [this] { return now; };
  }
  void advance(double seconds) {
    now += std::chrono::duration_cast<std::chrono::steady_clock::duration>(std::chrono::duration<double>(seconds));
  }
};

// What a display drew on its terminal, through an in-memory stream.
class DrawnText {
 public:
  DrawnText() : stream_(open_memstream(&buffer_, &size_)) {}
  ~DrawnText() {
    std::fclose(stream_);
    std::free(buffer_);
  }
  std::FILE* stream() { return stream_; }
  std::string text() {
    std::fflush(stream_);
    return std::string(buffer_, size_);
  }

 private:
  char* buffer_ = nullptr;
  std::size_t size_ = 0;
  std::FILE* stream_;
};

ProgressSettings terminal_settings(SteppedClock& clock, DrawnText& drawn) {
  ProgressSettings settings;
  settings.mode = ProgressMode::terminal;
  settings.total_records = 1000;
  settings.clock = clock.clock();
  settings.terminal = drawn.stream();
  return settings;
}

TEST(ProgressDisplay, RedrawsOnlyOnceTheIntervalHasPassed) {
  SteppedClock clock;
  DrawnText drawn;
  ProgressDisplay display(terminal_settings(clock, drawn));
  clock.advance(0.1);
  display.update(100);
  EXPECT_EQ(drawn.text(), "") << "0.1 s is within the 0.25 s interval";
  clock.advance(0.2);
  display.update(300);
  EXPECT_EQ(drawn.text(), "\rprogress: 300 records of 1000 (30.0%), 1000 records/s, elapsed 0:00, about 0:01 left\33[K");
  clock.advance(0.1);
  display.update(400);
  EXPECT_EQ(drawn.text().find("400 records"), std::string::npos) << "the interval restarts at each redraw";
}

TEST(ProgressDisplay, AScanShorterThanTheIntervalStillEndsWithALine) {
  SteppedClock clock;
  DrawnText drawn;
  ProgressDisplay display(terminal_settings(clock, drawn));
  clock.advance(0.05);
  display.update(1000);
  display.finish(1000);
  EXPECT_EQ(drawn.text(), "\rprogress: 1000 records of 1000 (100.0%), 20000 records/s, elapsed 0:00, about 0:00 left\33[K\n");
}

TEST(ProgressDisplay, FinalLineFollowsRedrawsAndEndsTheLine) {
  SteppedClock clock;
  DrawnText drawn;
  ProgressDisplay display(terminal_settings(clock, drawn));
  for (int block = 1; block <= 10; ++block) {
    clock.advance(1.0);
    display.update(static_cast<std::uint64_t>(block) * 100);
  }
  display.finish(1000);
  const std::string text = drawn.text();
  EXPECT_NE(text.find("\rprogress: 500 records of 1000 (50.0%), 100 records/s, elapsed 0:05"), std::string::npos);
  const std::string last = "\rprogress: 1000 records of 1000 (100.0%), 100 records/s, elapsed 0:10, about 0:00 left\33[K\n";
  ASSERT_GE(text.size(), last.size());
  EXPECT_EQ(text.substr(text.size() - last.size()), last);
}

TEST(ProgressDisplay, SilentDrawsNothing) {
  SteppedClock clock;
  DrawnText drawn;
  ProgressSettings settings = terminal_settings(clock, drawn);
  settings.mode = ProgressMode::silent;
  ProgressDisplay display(settings);
  clock.advance(10.0);
  display.update(10);
  display.finish(10);
  EXPECT_EQ(drawn.text(), "");
}

}  // namespace
}  // namespace tamis::testing
