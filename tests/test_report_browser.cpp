// The report's HTML page opened in a real browser: Debian's chromium
// (scripts/install_dependencies.sh), headless. A copy of the page gets two
// small scripts, one that records every error event from the start and one
// that, once the page has loaded, writes each image's natural size and the
// errors into the DOM, which chromium's --dump-dom prints. Console messages
// come from chromium's log on stderr. Virtual time (--virtual-time-budget)
// lets the page load completely before the DOM is dumped, however fast or
// slow the machine. Where no chromium is installed the tests are skipped,
// and say so.
#include <gtest/gtest.h>

#include <cstdio>
#include <string>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/results_writer.hpp"

namespace tamis::testing {
namespace {

// Records every error (scripts, and images or other resources that fail) from
// the top of <head> on.
const char* const error_recorder =
    "<script>window.browserCheckErrors = [];\n"
    "window.addEventListener('error', function (event) {\n"
    "  var target = event.target && event.target.tagName ? ' (' + event.target.tagName + ')' : '';\n"
    "  window.browserCheckErrors.push((event.message || 'resource failed to load') + target);\n"
    "}, true);</script>\n";

// After load: one line per image, one per recorded error, and the page's
// width against the window's, in a <pre>.
const char* const load_reporter =
    "<script>window.addEventListener('load', function () {\n"
    "  var page = document.documentElement;\n"
    "  var lines = ['width ' + page.scrollWidth + ' ' + page.clientWidth];\n"
    "  document.querySelectorAll('img').forEach(function (image) {\n"
    "    lines.push('image ' + image.className + ' ' + (image.complete ? 'complete' : 'incomplete') + ' ' +\n"
    "               image.naturalWidth + 'x' + image.naturalHeight);\n"
    "  });\n"
    "  window.browserCheckErrors.forEach(function (message) { lines.push('error ' + message); });\n"
    "  var report = document.createElement('pre');\n"
    "  report.id = 'browser-check';\n"
    "  report.textContent = lines.join('\\n');\n"
    "  document.body.appendChild(report);\n"
    "});</script>\n";

std::string find_browser() {
  for (const char* name : {"chromium", "chromium-browser"}) {
    int exit_code = -1;
    std::string path = capture_command(std::string("command -v ") + name + " 2>/dev/null", &exit_code);
    while (!path.empty() && path.back() == '\n') path.pop_back();
    if (exit_code == 0 && !path.empty()) return path;
  }
  return "";
}

struct BrowserView {
  std::vector<std::string> images;         // "CLASS complete|incomplete WIDTHxHEIGHT"
  std::vector<std::string> errors;         // error events the page raised
  std::vector<std::string> console_lines;  // chromium's log lines of console messages
  bool reported = false;                   // the load script ran and wrote its <pre>
  int page_width = 0;                      // the page's scroll width, and the window's width
  int window_width = 0;
};

// Opens a copy of the page with the two scripts in headless chromium, in a
// window narrower than the plots' natural width.
BrowserView open_in_browser(const std::string& browser, const std::string& html_path, const std::string& work_dir) {
  std::string page = read_text_file(html_path);
  const std::size_t head = page.find("<head>");
  const std::size_t body_end = page.rfind("</body>");
  EXPECT_NE(head, std::string::npos);
  EXPECT_NE(body_end, std::string::npos);
  if (head == std::string::npos || body_end == std::string::npos) return {};
  page.insert(body_end, load_reporter);
  page.insert(head + 6, error_recorder);
  const std::string probe = work_dir + "/probe.html";
  write_text_file(probe, page);

  // --no-sandbox: the test may run as root, where chromium's sandbox refuses
  // to start; the page is our own. Its own profile keeps runs apart. The
  // time-out only ends a browser that hangs; a normal run takes seconds.
  const std::string command = "timeout 300 '" + browser +
                              "' --headless --no-sandbox --disable-gpu --disable-dev-shm-usage --no-first-run"
                              " --no-default-browser-check --disable-extensions --user-data-dir='" +
                              work_dir + "/profile' --window-size=800,1000 --virtual-time-budget=10000 --enable-logging=stderr --v=0"
                              " --dump-dom 'file://" +
                              probe + "' > '" + work_dir + "/dom.html' 2> '" + work_dir + "/browser.log'";
  EXPECT_EQ(run_command(command), 0) << read_text_file(work_dir + "/browser.log");

  BrowserView view;
  const std::string dom = read_text_file(work_dir + "/dom.html");
  const std::string opening = "<pre id=\"browser-check\">";
  const std::size_t start = dom.find(opening);
  if (start != std::string::npos) {
    view.reported = true;
    const std::size_t end = dom.find("</pre>", start);
    for (const std::string& line : lines_of(dom.substr(start + opening.size(), end - start - opening.size()))) {
      if (line.rfind("image ", 0) == 0) view.images.push_back(line.substr(6));
      if (line.rfind("error ", 0) == 0) view.errors.push_back(line.substr(6));
      if (line.rfind("width ", 0) == 0) std::sscanf(line.c_str(), "width %d %d", &view.page_width, &view.window_width);
    }
  }
  // chromium logs each console message as "[...:INFO:CONSOLE:LINE] "text", source: ..."
  for (const std::string& line : lines_of(read_text_file(work_dir + "/browser.log"))) {
    if (line.find(":CONSOLE") != std::string::npos) view.console_lines.push_back(line);
  }
  return view;
}

// Width and height from a PNG's IHDR chunk: big-endian at bytes 16 and 20
// (PNG specification, ISO/IEC 15948, sections 5.2 and 11.2.2).
std::string png_size(const std::string& path) {
  const std::string bytes = read_text_file(path);
  if (bytes.size() < 24) return "";
  auto big_endian = [&](std::size_t at) {
    std::uint32_t value = 0;
    for (std::size_t byte_idx = at; byte_idx < at + 4; ++byte_idx) {
      value = value << 8 | static_cast<unsigned char>(bytes[byte_idx]);
    }
    return value;
  };
  return std::to_string(big_endian(16)) + "x" + std::to_string(big_endian(20));
}

std::string joined(const std::vector<std::string>& lines) {
  std::string text;
  for (const std::string& line : lines) text += line + "\n";
  return text;
}

// Set results for fev1_litres, written here beside the scan's file as
// `scan --sets` would write them: the page gains the set plots and table.
void write_set_results(const std::string& path) {
  BgzfTextFile file(path);
  std::string text = set_result_header_line();
  const char* const names[] = {"SRG0001", "SRG0002", "SRG0003", "SRG0004"};
  for (int set_idx = 0; set_idx < 4; ++set_idx) {
    SetResultRow row;
    row.set = names[set_idx];
    row.chromosome = std::to_string(1 + set_idx / 2);
    row.start = 20000 + 400000 * set_idx;
    row.end = row.start + 30000;
    row.n_variants = 6;
    row.total_mac = 14;
    row.overall_log_p = row.burden_log_p = row.variance_log_p = row.optimal_log_p = row.cauchy_log_p =
        -2.0 - 4.0 * set_idx;
    row.burden_test = "score";
    row.variance_method = "davies";
    row.top_variant = std::string(names[set_idx]) + "_top";
    row.weights = "beta_1_25";
    row.n = 1500;
    append_set_result_row(row, text);
  }
  file.write(text);
  file.commit(IndexKind::tabix_sets);
}

class ReportInBrowser : public ::testing::Test {
 protected:
  void SetUp() override {
    browser_ = find_browser();
    if (browser_.empty()) {
      GTEST_SKIP() << "no chromium on PATH, so the report page is not opened in a browser "
                      "(scripts/install_dependencies.sh installs Debian's chromium)";
    }
  }
  std::string browser_;
};

TEST_F(ReportInBrowser, EveryPlotLoadsAndThePageLogsNoError) {
  const std::string dir = make_temp_dir("report_browser");
  // A small cohort with planted effects, so that both traits have lead loci.
  ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir + "/cohort --samples 1500 --variants 2000 --seed 3" +
                        " 2>/dev/null"),
            0);
  ASSERT_EQ(run_command(tamis_binary() + " scan --genotypes " + dir + "/cohort.vcf.gz --traits " + dir +
                        "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,pc1"
                        " --quiet --threads 2 --out " + dir + "/scan"),
            0);
  write_set_results(dir + "/scan.fev1_litres.sets.tsv.gz");
  ASSERT_EQ(run_command(tamis_binary() + " report --results " + dir + "/scan.fev1_litres.tsv.gz " + dir +
                        "/scan.winter_wheeze.tsv.gz --locus-radius-kb 250 --out " + dir + "/report 2>/dev/null"),
            0);

  const BrowserView view = open_in_browser(browser_, dir + "/report.html", dir);
  ASSERT_TRUE(view.reported) << "the page's load event never came";
  // Each image decoded at the size of the PNG file it inlines.
  std::vector<std::string> expected;
  for (const char* trait : {"fev1_litres", "winter_wheeze"}) {
    for (const char* plot : {"manhattan", "qq"}) {
      const std::string size = png_size(dir + "/report." + trait + "." + plot + ".png");
      EXPECT_NE(size.find_first_not_of("0x"), std::string::npos) << trait << " " << plot;
      expected.push_back(std::string(plot) + " complete " + size);
    }
    if (std::string(trait) != "fev1_litres") continue;
    for (const char* plot : {"manhattan", "qq"}) {
      const std::string size = png_size(dir + "/report." + trait + ".sets." + plot + ".png");
      EXPECT_NE(size.find_first_not_of("0x"), std::string::npos) << trait << " sets " << plot;
      expected.push_back(std::string(plot) + " sets complete " + size);
    }
  }
  EXPECT_EQ(view.images, expected);
  EXPECT_TRUE(view.errors.empty()) << joined(view.errors);
  EXPECT_TRUE(view.console_lines.empty()) << joined(view.console_lines);
  // In an 800-pixel window the page scrolls only up and down: plots shrink
  // to fit, and wide tables scroll in their own boxes.
  EXPECT_GT(view.window_width, 0);
  EXPECT_LE(view.page_width, view.window_width);
  // The page as the browser built it holds both traits' lead loci tables.
  const std::string dom = read_text_file(dir + "/dom.html");
  std::size_t loci_tables = 0;
  for (std::size_t at = dom.find("<table class=\"loci\">"); at != std::string::npos;
       at = dom.find("<table class=\"loci\">", at + 1)) {
    ++loci_tables;
  }
  EXPECT_EQ(loci_tables, 2u);
  EXPECT_NE(dom.find("<table class=\"sets\">"), std::string::npos) << "the top sets of fev1_litres";
  EXPECT_NE(dom.find("within 250 kb of it"), std::string::npos);
}

TEST_F(ReportInBrowser, ABrokenImageAndAScriptErrorAreCaught) {
  // The check itself, on a page made to fail: an image whose data is no PNG
  // and a script that throws and logs to the console.
  const std::string dir = make_temp_dir("report_browser_broken");
  write_text_file(dir + "/broken.html",
                  "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<title>broken</title>\n</head>\n<body>\n"
                  "<img class=\"qq\" alt=\"not a PNG\" src=\"data:image/png;base64,AAAAAAAA\">\n"
                  "<script>console.warn('a warning'); undefined_function();</script>\n</body>\n</html>\n");
  const BrowserView view = open_in_browser(browser_, dir + "/broken.html", dir);
  ASSERT_TRUE(view.reported);
  EXPECT_EQ(view.images, std::vector<std::string>({"qq complete 0x0"}));
  EXPECT_EQ(view.errors.size(), 2u) << joined(view.errors);  // the image and the uncaught ReferenceError
  EXPECT_EQ(view.console_lines.size(), 2u) << joined(view.console_lines);
}

}  // namespace
}  // namespace tamis::testing
