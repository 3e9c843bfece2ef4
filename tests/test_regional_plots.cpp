// Regional plots in `report`: the LD r^2 against R, the plot's pixels, the
// report's files and page from a simulated cohort, the signal marks, and the
// errors a user can meet.
#include <cairo.h>
#include <gtest/gtest.h>

#include <cmath>
#include <cstring>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "report/locus_ld.hpp"
#include "report/regional_plot.hpp"
#include "report/signal_marks.hpp"
#include "support/test_support.hpp"
#include "tamis/linkage_disequilibrium.hpp"

// Under LeakSanitizer: fontconfig keeps its configuration for the life of
// the process by design (as in test_report.cpp).
extern "C" const char* __lsan_default_suppressions() { return "leak:libfontconfig.so\n"; }

namespace {

using tamis::dosage_r_squared;
using tamis::impute_missing_with_mean;
using tamis::testing::capture_command;
using tamis::testing::data_rows;
using tamis::testing::file_exists;
using tamis::testing::make_temp_dir;
using tamis::testing::read_gzip_file;
using tamis::testing::read_text_file;
using tamis::testing::run_command;
using tamis::testing::split_fields;
using tamis::testing::tamis_binary;
using tamis::testing::write_text_file;

const double nan = std::numeric_limits<double>::quiet_NaN();

// ---- r^2 ---------------------------------------------------------------------

std::vector<double> imputed(std::vector<double> dosages) {
  EXPECT_TRUE(impute_missing_with_mean(dosages));
  return dosages;
}

TEST(LinkageDisequilibrium, RSquaredMatchesR) {
  // Missing dosages take the mean of the called ones, as the scan imputes them.
  const std::vector<double> a = imputed({0, 1, 2, nan, 1, 0, 0.25, 1.75, 2, nan, 0, 1});
  const std::vector<double> b = imputed({1, 1, 2, 0, nan, 0, 0.5, 2, 1.9, 1, 0, 0});
  EXPECT_EQ(a[3], 0.9);  // R 4.2.2: mean(a, na.rm = TRUE) = 0.9
  // Reference: R 4.2.2 stats, a[is.na(a)] <- mean(a, na.rm = TRUE) (likewise b), then cor(a, b)^2.
  EXPECT_NEAR(dosage_r_squared(a, b), 0.59577990568089523, 1e-10);
  const std::vector<double> one_carrier = {0, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0, 0};
  EXPECT_NEAR(dosage_r_squared(one_carrier, b), 0.11668409063397561, 1e-10);  // R 4.2.2 cor(r, b)^2
  EXPECT_NEAR(dosage_r_squared(one_carrier, a), 0.14666163711806868, 1e-10);  // R 4.2.2 cor(r, a)^2
  // An allele near fixation: the sums about the means keep the small variance exact.
  const std::vector<double> nearly_fixed = {2, 2, 2, 1.998, 2, 2, 1.999, 2, 2, 2, 2, 1.997};
  EXPECT_NEAR(dosage_r_squared(nearly_fixed, a), 0.0018483591097693648, 1e-10);  // R 4.2.2 cor(c1, a)^2
}

TEST(LinkageDisequilibrium, UndefinedWithoutVariation) {
  EXPECT_TRUE(std::isnan(dosage_r_squared({0.3, 0.3, 0.3, 0.3}, {0, 1, 2, 1})));
  EXPECT_TRUE(std::isnan(dosage_r_squared({0, 1, 2, 1}, {2, 2, 2, 2})));
  EXPECT_TRUE(std::isnan(dosage_r_squared({}, {})));
  std::vector<double> all_missing = {nan, nan};
  EXPECT_FALSE(impute_missing_with_mean(all_missing));
  EXPECT_TRUE(std::isnan(all_missing[0]));
}

TEST(LinkageDisequilibrium, SymmetricBoundedAndBlindToAlleleCoding) {
  std::mt19937_64 generator(17);
  std::uniform_real_distribution<double> frequency(0.02, 0.5);
  for (int trial = 0; trial < 50; ++trial) {
    std::binomial_distribution<int> first(2, frequency(generator)), second(2, frequency(generator));
    std::vector<double> a(300), b(300), flipped(300);
    for (std::size_t sample_idx = 0; sample_idx < a.size(); ++sample_idx) {
      a[sample_idx] = first(generator);
      // Half the time the second variant copies the first: partial LD.
      b[sample_idx] = generator() % 2 ? a[sample_idx] : second(generator);
      flipped[sample_idx] = 2.0 - b[sample_idx];  // the other allele counted
    }
    const double r_squared = dosage_r_squared(a, b);
    if (std::isnan(r_squared)) continue;
    EXPECT_GE(r_squared, 0.0);
    EXPECT_LE(r_squared, 1.0);
    EXPECT_NEAR(dosage_r_squared(b, a), r_squared, 1e-14);
    EXPECT_NEAR(dosage_r_squared(a, flipped), r_squared, 1e-12);
    EXPECT_EQ(dosage_r_squared(a, a), 1.0);
  }
}

// ---- the colour scale and the picture ------------------------------------------

TEST(RegionalPlot, ColourScaleDarkensSteadilyWithRSquared) {
  // Relative luminance weights of sRGB (ITU-R BT.709), applied to the
  // components directly: enough to order colours by lightness.
  auto lightness = [](tamis::report::Rgb colour) {
    return 0.2126 * colour.red + 0.7152 * colour.green + 0.0722 * colour.blue;
  };
  double previous = 2.0;
  for (int step = 0; step <= 100; ++step) {
    const double now = lightness(tamis::report::ld_colour(step / 100.0));
    EXPECT_LT(now, previous) << "r2 " << step / 100.0;
    previous = now;
  }
}

struct Pixel {
  int red, green, blue;
};

class PngImage {
 public:
  explicit PngImage(const std::string& path) : surface_(cairo_image_surface_create_from_png(path.c_str())) {}
  ~PngImage() { cairo_surface_destroy(surface_); }
  bool ok() const { return cairo_surface_status(surface_) == CAIRO_STATUS_SUCCESS; }
  int width() const { return cairo_image_surface_get_width(surface_); }
  int height() const { return cairo_image_surface_get_height(surface_); }
  Pixel at(int x, int y) const {
    std::uint32_t pixel;
    std::memcpy(&pixel, cairo_image_surface_get_data(surface_) + y * cairo_image_surface_get_stride(surface_) + x * 4,
                4);
    return Pixel{static_cast<int>((pixel >> 16) & 0xff), static_cast<int>((pixel >> 8) & 0xff),
                 static_cast<int>(pixel & 0xff)};
  }
  // Whether some pixel within `reach` of (x, y) is within `tolerance` of the colour.
  bool has_near(double x, double y, int reach, tamis::report::Rgb colour, int tolerance = 24) const {
    for (int row = static_cast<int>(y) - reach; row <= static_cast<int>(y) + reach; ++row) {
      for (int column = static_cast<int>(x) - reach; column <= static_cast<int>(x) + reach; ++column) {
        if (matches(at(column, row), colour, tolerance)) return true;
      }
    }
    return false;
  }
  std::size_t count(tamis::report::Rgb colour, int tolerance = 24) const {
    std::size_t total = 0;
    for (int row = 0; row < height(); ++row) {
      for (int column = 0; column < width(); ++column) total += matches(at(column, row), colour, tolerance);
    }
    return total;
  }
  static bool matches(Pixel pixel, tamis::report::Rgb colour, int tolerance) {
    return std::abs(pixel.red - static_cast<int>(std::lround(colour.red * 255))) <= tolerance &&
           std::abs(pixel.green - static_cast<int>(std::lround(colour.green * 255))) <= tolerance &&
           std::abs(pixel.blue - static_cast<int>(std::lround(colour.blue * 255))) <= tolerance;
  }

 private:
  cairo_surface_t* surface_;
};

bool svg_parses(const std::string& path) {
  // Parsed by Python 3.11's xml.etree.ElementTree (Debian python3.11).
  int exit_code = -1;
  const std::string root = capture_command(
      "python3 -c \"import sys, xml.etree.ElementTree as E; print(E.parse(sys.argv[1]).getroot().tag)\" '" + path +
          "'",
      &exit_code);
  return exit_code == 0 && root == "{http://www.w3.org/2000/svg}svg\n";
}

// A window drawn by hand: variants every 5 kb, r^2 falling with distance
// from the lead at 400 kb; one isolated variant of r^2 0.5 stands high at
// 150 kb and another signal's lead at 700 kb.
tamis::report::LocusWindow hand_made_window() {
  tamis::report::LocusWindow window;
  window.rank = 1;
  window.chromosome = "7";
  window.first = 1;
  window.last = 800001;
  window.lead_position = 400000;
  window.lead_variant_id = "7_400000_G_A";
  window.lead_name = "rs400";
  window.lead_p_text = "1.5e-12";
  for (std::int64_t position = 5000; position <= 795000; position += 5000) {
    tamis::report::WindowVariant variant;
    variant.position = position;
    variant.variant_id = "7_" + std::to_string(position) + "_G_A";
    const double distance = std::fabs(static_cast<double>(position - window.lead_position)) / 1e5;
    variant.r_squared = std::exp(-distance);
    variant.neg_log_10_p = static_cast<float>(11.8 * variant.r_squared * 0.8);
    if (position == window.lead_position) {
      window.lead_idx = window.variants.size();
      variant.neg_log_10_p = 11.8f;
      variant.r_squared = 1.0;
    }
    if (position == 150000) {
      variant.r_squared = 0.5;
      variant.neg_log_10_p = 9.5f;
    }
    if (position == 700000) variant.neg_log_10_p = 8.0f;
    if (position == 20000) variant.r_squared = nan;  // not in the genotype files
    window.variants.push_back(variant);
  }
  return window;
}

double x_of(const tamis::report::LocusWindow& window, std::int64_t position) {
  return tamis::report::lay_out_regional(window).x_of(position);
}
double y_of(const tamis::report::LocusWindow& window, double neg_log_10_p) {
  return tamis::report::lay_out_regional(window).y_of(neg_log_10_p);
}

TEST(RegionalPlot, LeadNeighboursAndMarksAreWhereTheyBelong) {
  const std::string dir = make_temp_dir("regional_plot_pixels");
  tamis::report::LocusWindow window = hand_made_window();
  window.unmeasured = 1;
  tamis::report::SignalMarks marks;
  marks.signals_path = dir + "/fixture.signals.tsv";
  marks.credible_path = dir + "/fixture.credible.tsv";
  marks.leads = {{"1", "7", 400000, "7_400000_G_A"}, {"2", "7", 700000, "7_700000_G_A"}};
  marks.in_95 = {"7_150000_G_A"};
  tamis::report::RegionalFacts facts;
  facts.trait = "fev1_litres";
  facts.analysis_samples = 1980;
  facts.marks = &marks;
  EXPECT_EQ(tamis::report::render_regional(window, facts, dir + "/marked.png", dir + "/marked.svg"),
            window.variants.size());
  facts.marks = nullptr;
  tamis::report::render_regional(window, facts, dir + "/plain.png", dir + "/plain.svg");

  const PngImage marked(dir + "/marked.png"), plain(dir + "/plain.png");
  ASSERT_TRUE(marked.ok());
  ASSERT_TRUE(plain.ok());
  EXPECT_EQ(marked.width(), 1200);
  EXPECT_EQ(marked.height(), 660);
  EXPECT_TRUE(svg_parses(dir + "/marked.svg"));
  EXPECT_TRUE(svg_parses(dir + "/plain.svg"));

  using tamis::report::ld_colour;
  // The lead: its own colour (r^2 = 1) at its place, in both pictures.
  const double lead_x = x_of(window, 400000), lead_y = y_of(window, 11.8);
  EXPECT_TRUE(PngImage::matches(marked.at(static_cast<int>(lead_x), static_cast<int>(lead_y)), ld_colour(1.0), 6));
  EXPECT_TRUE(PngImage::matches(plain.at(static_cast<int>(lead_x), static_cast<int>(lead_y)), ld_colour(1.0), 6));
  // The isolated variant of r^2 0.5 has the scale's colour at 0.5.
  const double half_x = x_of(window, 150000), half_y = y_of(window, 9.5);
  EXPECT_TRUE(PngImage::matches(plain.at(static_cast<int>(half_x), static_cast<int>(half_y)), ld_colour(0.5), 6));
  // Marks: a teal ring round the credible-set member and a teal square round
  // the other signal's lead, present only with the marks.
  const tamis::report::Rgb teal{0.114, 0.435, 0.478};
  EXPECT_TRUE(marked.has_near(half_x + 7.4, half_y, 1, teal));
  EXPECT_FALSE(plain.has_near(half_x + 7.4, half_y, 1, teal));
  const double other_x = x_of(window, 700000), other_y = y_of(window, 8.0);
  EXPECT_TRUE(marked.has_near(other_x + 7.2, other_y, 1, teal));
  EXPECT_TRUE(marked.has_near(other_x - 7.2, other_y - 7.2, 1, teal));  // a square's corner
  EXPECT_FALSE(plain.has_near(other_x + 7.2, other_y, 1, teal));
  EXPECT_GT(marked.count(teal), plain.count(teal) + 100);
}

// ---- the report on a simulated cohort -----------------------------------------

const std::string kCovariates = "age,sex,village,pc1,pc2,pc3,pc4";

class RegionalReport : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("regional_report");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 600 --variants 500 --chromosomes 1 --seed 7 2>/dev/null"),
              0);
    ASSERT_EQ(run_command(tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
                          "/cohort.traits.tsv --trait fev1_litres --covariates " + kCovariates + " --out " + dir_ +
                          "/scan --threads 1 --quiet 2>/dev/null"),
              0);
    ASSERT_EQ(run_command(report_command("/report") + " 2>/dev/null"), 0);
  }

  static std::string report_command(const std::string& out, const std::string& extra = "") {
    return tamis_binary() + " report --results " + dir_ + "/scan.fev1_litres.tsv.gz --out " + dir_ + out +
           " --lead-below 1e-4 --locus-radius-kb 250 --regional-plots 2 --genotypes " + dir_ +
           "/cohort.vcf.gz --traits " + dir_ + "/cohort.traits.tsv " + extra;
  }

  // The locus_ld.tsv rows of one locus.
  static std::vector<std::vector<std::string>> locus_rows(const std::string& out, const std::string& locus) {
    std::vector<std::vector<std::string>> rows;
    for (const auto& row : data_rows(read_text_file(dir_ + out + ".locus_ld.tsv"))) {
      if (row.at(1) == locus) rows.push_back(row);
    }
    return rows;
  }

  static std::string dir_;
};
std::string RegionalReport::dir_;

TEST_F(RegionalReport, WritesPlotsTableAndPage) {
  for (const char* suffix : {".fev1_litres.locus-1.png", ".fev1_litres.locus-1.svg", ".fev1_litres.locus-2.png",
                             ".fev1_litres.locus-2.svg", ".locus_ld.tsv", ".html"}) {
    EXPECT_TRUE(file_exists(dir_ + "/report" + suffix)) << suffix;
    EXPECT_FALSE(file_exists(dir_ + "/report" + suffix + ".partial")) << suffix;
  }
  EXPECT_FALSE(file_exists(dir_ + "/report.fev1_litres.locus-3.png"));  // --regional-plots 2
  EXPECT_TRUE(svg_parses(dir_ + "/report.fev1_litres.locus-1.svg"));
  const std::string html = read_text_file(dir_ + "/report.html");
  EXPECT_NE(html.find("<h3>Regional plots</h3>"), std::string::npos);
  EXPECT_NE(html.find("class=\"regional\""), std::string::npos);
  EXPECT_NE(html.find("statistical associations"), std::string::npos);
}

TEST_F(RegionalReport, LdTableHoldsTheWindowWithTheLeadAtOne) {
  const auto header = split_fields(tamis::testing::lines_of(read_text_file(dir_ + "/report.locus_ld.tsv")).at(0));
  EXPECT_EQ(header, (std::vector<std::string>{"trait", "locus", "lead_variant_id", "chromosome", "base_pair_location",
                                              "variant_id", "neg_log_10_p_value", "r2_with_lead"}));
  const auto loci = data_rows(read_text_file(dir_ + "/report.loci.tsv"));
  ASSERT_GE(loci.size(), 2u);
  for (std::size_t locus = 1; locus <= 2; ++locus) {
    const auto rows = locus_rows("/report", std::to_string(locus));
    ASSERT_FALSE(rows.empty());
    const std::string& lead_id = rows[0][2];
    EXPECT_EQ(lead_id, loci[locus - 1][3]);
    const std::int64_t lead_position = std::stoll(loci[locus - 1][2]);
    std::size_t leads = 0;
    for (const auto& row : rows) {
      EXPECT_LE(std::llabs(std::stoll(row[4]) - lead_position), 250000) << row[5];
      if (row[7] == "#NA") continue;
      const double r_squared = std::stod(row[7]);
      EXPECT_GE(r_squared, 0.0);
      EXPECT_LE(r_squared, 1.0);
      if (row[5] == lead_id) {
        ++leads;
        EXPECT_NEAR(r_squared, 1.0, 1e-12);
      }
    }
    EXPECT_EQ(leads, 1u);
    // Every results row of the window is listed: counted from the results file.
    std::size_t in_window = 0;
    for (const auto& row : data_rows(read_gzip_file(dir_ + "/scan.fev1_litres.tsv.gz"))) {
      if (std::llabs(std::stoll(row[1]) - lead_position) <= 250000) ++in_window;
    }
    EXPECT_EQ(rows.size(), in_window);
  }
}

TEST_F(RegionalReport, LeadPointDrawnWhereTheLayoutPutsIt) {
  const auto rows = locus_rows("/report", "1");
  ASSERT_FALSE(rows.empty());
  tamis::report::LocusWindow window;
  const auto loci = data_rows(read_text_file(dir_ + "/report.loci.tsv"));
  window.lead_position = std::stoll(loci[0][2]);
  window.first = std::max<std::int64_t>(1, window.lead_position - 250000);
  window.last = window.lead_position + 250000;
  double lead_neg_log_10_p = 0;
  for (const auto& row : rows) {
    tamis::report::WindowVariant variant;
    variant.position = std::stoll(row[4]);
    variant.neg_log_10_p = row[6] == "#NA" ? std::nanf("") : std::stof(row[6]);
    if (row[5] == row[2]) lead_neg_log_10_p = variant.neg_log_10_p;
    window.variants.push_back(variant);
  }
  const PngImage image(dir_ + "/report.fev1_litres.locus-1.png");
  ASSERT_TRUE(image.ok());
  EXPECT_EQ(image.width(), 1200);
  EXPECT_EQ(image.height(), 660);
  const tamis::report::RegionalLayout layout = tamis::report::lay_out_regional(window);
  const Pixel centre = image.at(static_cast<int>(layout.x_of(window.lead_position)),
                                static_cast<int>(layout.y_of(lead_neg_log_10_p)));
  EXPECT_TRUE(PngImage::matches(centre, tamis::report::ld_colour(1.0), 6))
      << centre.red << "," << centre.green << "," << centre.blue;
}

TEST_F(RegionalReport, SignalFilesMarkThePlotAndAreNamedOnThePage) {
  const auto rows = locus_rows("/report", "1");
  ASSERT_GE(rows.size(), 3u);
  // Fixture files in the layout `tamis signals` writes; columns found by name.
  write_text_file(dir_ + "/fine.fev1_litres.signals.tsv",
                  "signal\tlocus\tchromosome\tbase_pair_location\tvariant_id\teffect_allele\tother_allele\n"
                  "1\t1\t" + rows[0][3] + "\t" + rows[0][4] + "\t" + rows[0][2] + "\tA\tG\n"
                  "2\t1\t" + rows[1][3] + "\t" + rows[1][4] + "\t" + rows[1][5] + "\tA\tG\n");
  write_text_file(dir_ + "/fine.fev1_litres.credible.tsv",
                  "signal\tchromosome\tbase_pair_location\tvariant_id\tpip\tin_95\tin_99\n"
                  "1\t" + rows[0][3] + "\t" + rows[2][4] + "\t" + rows[2][5] + "\t0.4\t1\t1\n"
                  "1\t" + rows[0][3] + "\t" + rows[1][4] + "\t" + rows[1][5] + "\t0.01\t0\t1\n");
  ASSERT_EQ(run_command(report_command("/marked", "--signals-from " + dir_ + "/fine 2>/dev/null")), 0);
  const std::string html = read_text_file(dir_ + "/marked.html");
  EXPECT_NE(html.find("Marked from " + dir_ + "/fine.fev1_litres.signals.tsv"), std::string::npos);
  const tamis::report::Rgb teal{0.114, 0.435, 0.478};
  EXPECT_GT(PngImage(dir_ + "/marked.fev1_litres.locus-1.png").count(teal),
            PngImage(dir_ + "/report.fev1_litres.locus-1.png").count(teal) + 100);

  // A damaged flag names the file, the line and the column.
  write_text_file(dir_ + "/bad.fev1_litres.credible.tsv",
                  "signal\tchromosome\tbase_pair_location\tvariant_id\tpip\tin_95\tin_99\n1\t1\t5\tx\t0.4\tyes\t1\n");
  int exit_code = 0;
  const std::string message =
      capture_command(report_command("/bad", "--signals-from " + dir_ + "/bad 2>&1"), &exit_code);
  EXPECT_EQ(exit_code, 7) << message;  // results_input
  EXPECT_NE(message.find("bad.fev1_litres.credible.tsv, line 2, column in_95"), std::string::npos) << message;
}

TEST_F(RegionalReport, ConditionedScanTakesItsCovariatesFromTheSidecar) {
  // The sidecar's adjusted_covariates also names the conditioning variant,
  // which is no table column: the report must leave it out.
  const auto loci = data_rows(read_text_file(dir_ + "/report.loci.tsv"));
  const std::string condition = loci.at(1).at(1) + ":" + loci.at(1).at(2) + ":" +
                                split_fields(loci.at(1).at(3), '_').at(2) + ":" +
                                split_fields(loci.at(1).at(3), '_').at(3);
  ASSERT_EQ(run_command(tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
                        "/cohort.traits.tsv --trait fev1_litres --covariates " + kCovariates + " --condition-on " +
                        condition + " --out " + dir_ + "/conditioned --threads 1 --quiet 2>/dev/null"),
            0);
  EXPECT_NE(read_text_file(dir_ + "/conditioned.fev1_litres.tsv.gz-meta.yaml").find(condition), std::string::npos);
  int exit_code = 0;
  const std::string message = capture_command(
      tamis_binary() + " report --results " + dir_ + "/conditioned.fev1_litres.tsv.gz --out " + dir_ +
          "/conditioned_report --lead-below 1e-4 --regional-plots 1 --genotypes " + dir_ + "/cohort.vcf.gz --traits " +
          dir_ + "/cohort.traits.tsv 2>&1",
      &exit_code);
  EXPECT_EQ(exit_code, 0) << message;
  EXPECT_TRUE(file_exists(dir_ + "/conditioned_report.fev1_litres.locus-1.png"));
}

TEST_F(RegionalReport, SamplesOtherThanTheScansAreRefused) {
  std::string dropped;
  const auto table = data_rows(read_text_file(dir_ + "/cohort.traits.tsv"));
  for (std::size_t row = 0; row < 5; ++row) dropped += table[row][0] + "\n";
  write_text_file(dir_ + "/drop.txt", dropped);
  int exit_code = 0;
  const std::string message =
      capture_command(report_command("/dropped", "--drop-samples " + dir_ + "/drop.txt 2>&1"), &exit_code);
  EXPECT_EQ(exit_code, 2) << message;  // usage
  EXPECT_NE(message.find("(column n)"), std::string::npos) << message;
  EXPECT_NE(message.find("sample lists the scan was given"), std::string::npos) << message;
}

TEST_F(RegionalReport, LeadMissingFromTheGenotypesIsNamed) {
  // The results as text, the lead's variant ID naming an allele the files lack.
  const auto loci = data_rows(read_text_file(dir_ + "/report.loci.tsv"));
  const std::string lead_id = loci.at(0).at(3);
  std::string text = read_gzip_file(dir_ + "/scan.fev1_litres.tsv.gz");
  text.replace(text.find(lead_id), lead_id.size(), lead_id + "T");
  write_text_file(dir_ + "/edited.fev1_litres.tsv", text);
  int exit_code = 0;
  const std::string message = capture_command(
      tamis_binary() + " report --results " + dir_ + "/edited.fev1_litres.tsv --out " + dir_ +
          "/edited --lead-below 1e-4 --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
          "/cohort.traits.tsv --covariates " + kCovariates + " 2>&1",
      &exit_code);
  EXPECT_EQ(exit_code, 4) << message;  // genotype_input
  EXPECT_NE(message.find("the lead variant " + lead_id + "T is not in the genotype files"), std::string::npos)
      << message;
  EXPECT_FALSE(file_exists(dir_ + "/edited.html"));
}

TEST_F(RegionalReport, GenotypesWithoutIndexOrTableAreRefused) {
  ASSERT_EQ(run_command("cp " + dir_ + "/cohort.vcf.gz " + dir_ + "/unindexed.vcf.gz"), 0);
  int exit_code = 0;
  std::string message = capture_command(tamis_binary() + " report --results " + dir_ + "/scan.fev1_litres.tsv.gz --out " +
                                            dir_ + "/unindexed --lead-below 1e-4 --genotypes " + dir_ +
                                            "/unindexed.vcf.gz --traits " + dir_ + "/cohort.traits.tsv 2>&1",
                                        &exit_code);
  EXPECT_EQ(exit_code, 4) << message;  // genotype_input
  EXPECT_NE(message.find("unindexed.vcf.gz"), std::string::npos) << message;
  message = capture_command(tamis_binary() + " report --results " + dir_ + "/scan.fev1_litres.tsv.gz --out " + dir_ +
                                "/untabled --genotypes " + dir_ + "/cohort.vcf.gz 2>&1",
                            &exit_code);
  EXPECT_EQ(exit_code, 2) << message;  // usage
  EXPECT_NE(message.find("trait table"), std::string::npos) << message;
}

}  // namespace
