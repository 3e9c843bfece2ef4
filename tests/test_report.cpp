// tamis report: the results reader, lambda_GC, lead loci grouped by distance, the plots
// (PNG, SVG), the HTML page, and the speed and thinning of a large input.
#include <cairo.h>
#include <gtest/gtest.h>
#include <zlib.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "report/html_page.hpp"
#include "report/manhattan_plot.hpp"
#include "report/order_statistics.hpp"
#include "report/trait_results.hpp"
#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/report.hpp"
#include "tamis/results_reader.hpp"
#include "tamis/results_writer.hpp"

// Under LeakSanitizer (TAMIS_SANITIZE builds): fontconfig, which cairo uses
// to find the plot font, keeps its configuration for the life of the process
// by design; that is not a leak of ours.
extern "C" const char* __lsan_default_suppressions() { return "leak:libfontconfig.so\n"; }

namespace {

using tamis::testing::make_temp_dir;
using tamis::testing::read_text_file;

const double ln10 = std::log(10.0);

// One row with the fields that matter to the report; the rest are plausible.
tamis::ResultRow make_row(const std::string& chromosome, std::int64_t position, double p_log10,
                          double score_chisq, const std::string& rsid = "") {
  tamis::ResultRow row;
  row.chromosome = chromosome;
  row.position = position;
  row.effect_allele = "A";
  row.other_allele = "G";
  row.beta = 0.125;
  row.standard_error = 0.03;
  row.effect_allele_frequency = 0.3;
  row.log_p = p_log10 * ln10;
  row.variant_id = chromosome + "_" + std::to_string(position) + "_G_A";
  row.rsid = rsid;
  row.n = 2000;
  row.test = "score";
  row.score_chisq = score_chisq;
  row.score_log_p = row.log_p;
  row.mac = 120;
  row.call_rate = 1.0;
  return row;
}

// Written through tamis's own BGZF writer, as a scan would.
void write_results(const std::string& path, const std::vector<tamis::ResultRow>& rows) {
  tamis::BgzfTextFile file(path);
  file.write(tamis::result_header_line());
  std::string text;
  for (const tamis::ResultRow& row : rows) tamis::append_result_row(row, text);
  file.write(text);
  file.commit(tamis::IndexKind::none);
}

std::vector<std::vector<std::string>> read_tsv(const std::string& text) {
  std::vector<std::vector<std::string>> table;
  std::istringstream lines(text);
  std::string line;
  while (std::getline(lines, line)) {
    std::vector<std::string> fields;
    std::size_t start = 0;
    while (true) {
      std::size_t tab = line.find('\t', start);
      fields.push_back(line.substr(start, tab == std::string::npos ? std::string::npos : tab - start));
      if (tab == std::string::npos) break;
      start = tab + 1;
    }
    table.push_back(fields);
  }
  return table;
}

std::size_t column_of(const std::vector<std::string>& header, const std::string& name) {
  auto found = std::find(header.begin(), header.end(), name);
  EXPECT_NE(found, header.end()) << name;
  return static_cast<std::size_t>(found - header.begin());
}

// Chi-square(1) draws for a null scan: squares of standard normal draws.
std::vector<tamis::ResultRow> null_rows(std::size_t count, unsigned seed) {
  std::mt19937_64 generator(seed);
  std::normal_distribution<double> normal(0.0, 1.0);
  std::vector<tamis::ResultRow> rows;
  for (std::size_t row_idx = 0; row_idx < count; ++row_idx) {
    const double z = normal(generator);
    const double chisq = z * z;
    // p = 2 * (1 - Phi(|z|)) = erfc(|z| / sqrt 2)
    const double p = std::erfc(std::fabs(z) / std::sqrt(2.0));
    const std::string chromosome = std::to_string(1 + row_idx * 3 / count);
    rows.push_back(make_row(chromosome, 10000 + static_cast<std::int64_t>(row_idx) * 1000, std::log10(p), chisq));
  }
  return rows;
}

std::string summary_field(const std::string& out_prefix, const std::string& column, std::size_t trait_row = 1) {
  const auto table = read_tsv(read_text_file(out_prefix + ".summary.tsv"));
  return table.at(trait_row).at(column_of(table.at(0), column));
}

// ---- order statistics ------------------------------------------------------

TEST(OrderStatistics, BetaQuantileMatchesR) {
  using tamis::report::beta_quantile;
  using tamis::report::regularized_incomplete_beta;
  // Reference: R 4.2.2 stats::pbeta and stats::qbeta.
  EXPECT_NEAR(regularized_incomplete_beta(0.3, 2.5, 4), 0.35219758590676714, 1e-12);  // pbeta(0.3, 2.5, 4)
  EXPECT_NEAR(regularized_incomplete_beta(0.9, 7, 3), 0.947027862, 1e-12);            // pbeta(0.9, 7, 3)
  auto relative = [](double value, double reference) { return std::fabs(value / reference - 1.0); };
  EXPECT_LT(relative(beta_quantile(0.025, 1, 100), 2.5314603297742054e-04), 1e-9);    // qbeta(0.025, 1, 100)
  EXPECT_LT(relative(beta_quantile(0.975, 1, 100), 3.6216692645176463e-02), 1e-9);    // qbeta(0.975, 1, 100)
  EXPECT_LT(relative(beta_quantile(0.025, 50, 51), 3.9832112950330101e-01), 1e-9);    // qbeta(0.025, 50, 51)
  EXPECT_LT(relative(beta_quantile(0.975, 50, 51), 5.9196367084454637e-01), 1e-9);    // qbeta(0.975, 50, 51)
  EXPECT_LT(relative(beta_quantile(0.025, 3, 1e6 - 2), 6.1867255019063880e-07), 1e-8);  // qbeta(0.025, 3, 1e6-2)
  EXPECT_LT(relative(beta_quantile(0.975, 1e6, 1), 9.9999997468219237e-01), 1e-12);   // qbeta(0.975, 1e6, 1)
  EXPECT_LT(relative(beta_quantile(0.025, 5e5, 5e5 + 1), 4.9901951919531184e-01), 1e-9);  // qbeta(0.025, 5e5, 5e5+1)
  EXPECT_LT(relative(beta_quantile(0.025, 1, 1e7), 2.5317807952240291e-09), 1e-8);    // qbeta(0.025, 1, 1e7)
}

// ---- lambda and the summary ------------------------------------------------

TEST(ReportSummary, LambdaMatchesIndependentMedianOfScoreChisq) {
  const std::string dir = make_temp_dir("report_lambda");
  const std::string results = dir + "/scan.fev1_litres.tsv.gz";
  std::vector<tamis::ResultRow> rows = null_rows(6000, 11);  // an even count: the median averages two
  rows[17].test = "lrt";
  rows[17].log10p_spread = 1.6;  // discordant
  rows[18].test = "lrt";
  rows[18].log10p_spread = 0.4;  // confirmed, concordant
  rows[19].log10p_spread = 2.0;  // a score row is never counted
  write_results(results, rows);

  tamis::ReportOptions options;
  options.results = {results};
  options.out_prefix = dir + "/report";
  tamis::ReportSummary summary = tamis::run_report(options);

  // Independent: every score_chisq field of the decompressed file, as doubles.
  const auto table = read_tsv(tamis::testing::read_gzip_file(results));
  const std::size_t chisq_column = column_of(table[0], "score_chisq");
  std::vector<double> chisq;
  for (std::size_t line_idx = 1; line_idx < table.size(); ++line_idx) {
    chisq.push_back(std::stod(table[line_idx][chisq_column]));
  }
  std::sort(chisq.begin(), chisq.end());
  const double median = 0.5 * (chisq[chisq.size() / 2 - 1] + chisq[chisq.size() / 2]);
  // 0.45493642311957283: the median of chi-square(1), R 4.2.2 qchisq(0.5, 1)
  // (Devlin & Roeder 1999 give 0.4549).
  const double expected_lambda = median / 0.45493642311957283;

  EXPECT_NEAR(std::stod(summary_field(options.out_prefix, "lambda_gc")), expected_lambda, 1e-6);
  EXPECT_NEAR(summary.traits.at(0).lambda_gc, expected_lambda, 1e-6);
  EXPECT_EQ(summary_field(options.out_prefix, "trait"), "fev1_litres");
  EXPECT_EQ(summary_field(options.out_prefix, "n_variants"), "6000");
  EXPECT_EQ(summary_field(options.out_prefix, "n_discordant"), "1");
  EXPECT_EQ(summary_field(options.out_prefix, "n_below_5e-8"), "0");
  EXPECT_EQ(summary_field(options.out_prefix, "n_lead_loci"), "0");
  // A null scan of this size: lambda near 1 (common practice: 1 +- a few %).
  EXPECT_NEAR(expected_lambda, 1.0, 0.08);

  const auto header = read_tsv(read_text_file(options.out_prefix + ".summary.tsv")).at(0);
  EXPECT_EQ(header, (std::vector<std::string>{"trait", "n_variants", "lambda_gc", "n_below_5e-8", "n_lead_loci",
                                              "max_neg_log_10_p", "n_discordant"}));
}

TEST(ReportSummary, LambdaOfHandCountedValues) {
  // median of {0.1, 0.2, 0.4, 0.9, 3} is 0.4; of six values the mean of the middle two.
  EXPECT_NEAR(tamis::compute_lambda_gc({3.0f, 0.1f, 0.9f, 0.2f, 0.4f}), 0.4f / 0.45493642311957283, 1e-7);
  EXPECT_NEAR(tamis::compute_lambda_gc({3.0f, 0.1f, 0.9f, 0.2f, 0.4f, 0.5f, NAN}), 0.45f / 0.45493642311957283,
              1e-7);
  EXPECT_TRUE(std::isnan(tamis::compute_lambda_gc({NAN})));
}

TEST(ReportSummary, HeaderOnlyFileGivesEmptyPlotsAndMissingLambda) {
  const std::string dir = make_temp_dir("report_empty_results");
  write_results(dir + "/scan.none.tsv.gz", {});
  tamis::ReportOptions options;
  options.results = {dir + "/scan.none.tsv.gz"};
  options.out_prefix = dir + "/report";
  const tamis::ReportSummary summary = tamis::run_report(options);
  EXPECT_EQ(summary_field(options.out_prefix, "n_variants"), "0");
  EXPECT_EQ(summary_field(options.out_prefix, "lambda_gc"), "#NA");  // GWAS-SSF's missing value
  EXPECT_EQ(summary.traits.at(0).manhattan_points_drawn, 0u);
  cairo_surface_t* image = cairo_image_surface_create_from_png((options.out_prefix + ".none.qq.png").c_str());
  EXPECT_EQ(cairo_surface_status(image), CAIRO_STATUS_SUCCESS);
  cairo_surface_destroy(image);
}

TEST(ReportSummary, BadOptionsAreUsageErrors) {
  tamis::ReportOptions options;
  options.out_prefix = make_temp_dir("report_bad_options") + "/report";
  try {
    tamis::run_report(options);
    ADD_FAILURE() << "no results files should be refused";
  } catch (const tamis::Error& error) {
    EXPECT_EQ(error.code(), tamis::ExitCode::usage);
  }
  options.results = {"x.tsv.gz"};
  options.lead_threshold = 0;
  try {
    tamis::run_report(options);
    ADD_FAILURE() << "a lead threshold of 0 should be refused";
  } catch (const tamis::Error& error) {
    EXPECT_EQ(error.code(), tamis::ExitCode::usage);
  }
  options.lead_threshold = 5e-8;
  options.locus_radius = -1;
  try {
    tamis::run_report(options);
    ADD_FAILURE() << "a negative locus radius should be refused";
  } catch (const tamis::Error& error) {
    EXPECT_EQ(error.code(), tamis::ExitCode::usage);
  }
}

TEST(ReportSummary, ContigOrder) {
  const std::string dir = make_temp_dir("report_contig_order");
  // GWAS-SSF codes go in numeric order, whatever order the scan met them in.
  write_results(dir + "/a.codes.tsv.gz", {make_row("2", 5, -1, 1), make_row("23", 5, -1, 1), make_row("1", 5, -1, 1),
                                          make_row("10", 5, -1, 1)});
  EXPECT_EQ(tamis::report::load_trait_results(dir + "/a.codes.tsv.gz", 5e-8).chromosome_names,
            (std::vector<std::string>{"1", "2", "10", "23"}));
  // Contig names (as-is mode) keep their order of first appearance.
  write_results(dir + "/a.names.tsv.gz", {make_row("chrB", 5, -1, 1), make_row("chrA", 5, -1, 1),
                                          make_row("scaffold_9", 5, -1, 1), make_row("chrB", 9, -1, 1)});
  const auto names = tamis::report::load_trait_results(dir + "/a.names.tsv.gz", 5e-8);
  EXPECT_EQ(names.chromosome_names, (std::vector<std::string>{"chrB", "chrA", "scaffold_9"}));
  EXPECT_EQ(names.chromosome_of, (std::vector<std::uint32_t>{0, 1, 2, 0}));
  EXPECT_EQ(tamis::report::chromosome_display_name("23"), "X");  // GWAS-SSF: 23 = X, 24 = Y, 25 = MT
  EXPECT_EQ(tamis::report::chromosome_display_name("24"), "Y");
  EXPECT_EQ(tamis::report::chromosome_display_name("25"), "MT");
}

// ---- lead loci -------------------------------------------------------------

// Chromosomes 1, 2 and X, overlapping loci, and p-values at the threshold.
std::vector<tamis::ResultRow> lead_locus_rows() {
  return {
      make_row("1", 400000, -0.3, 1.0),
      make_row("1", 500000, -0.3, 1.0),             // exactly 500 kb from lead A: inside
      make_row("1", 1000000, -20.0, 90.0, "rs11"),  // lead A
      make_row("1", 1400000, -10.0, 40.0),          // below 5e-8 but inside A's locus
      make_row("1", 1500001, -0.7, 0.2),            // 1 base outside A; inside B's locus
      make_row("1", 1900000, -9.0, 36.0, "rs12"),   // lead B: 900 kb from A
      make_row("1", 2300000, -0.5, 0.5),
      make_row("2", 1000000, std::log10(5e-8), 29.7),    // p = 5e-8 exactly: not below it
      make_row("2", 3000000, std::log10(4.99e-8), 29.8),  // lead C: just below
      make_row("2", 3200000, -2.0, 6.6),
      make_row("23", 50000000, std::log10(3.2) - 1088, 5000.0, "rs14"),  // lead D: p = 3.2e-1088
      make_row("23", 50400000, -3.0, 9.0),
  };
}

TEST(LeadLoci, GroupedByDistanceOnHandMadeFile) {
  const std::string dir = make_temp_dir("report_lead_loci");
  const std::string results = dir + "/scan.winter_wheeze.tsv.gz";
  write_results(results, lead_locus_rows());
  tamis::ReportOptions options;
  options.results = {results};
  options.out_prefix = dir + "/report";
  tamis::run_report(options);

  const auto loci = read_tsv(read_text_file(options.out_prefix + ".loci.tsv"));
  ASSERT_EQ(loci.size(), 5u);  // header and four leads
  EXPECT_EQ(loci[0], (std::vector<std::string>{"trait", "chromosome", "lead_position", "lead_variant_id", "lead_rsid",
                                               "p_value", "neg_log_10_p_value", "beta", "span_start", "span_end",
                                               "n_variants"}));
  auto lead = [&](std::size_t row, const std::string& column) { return loci[row][column_of(loci[0], column)]; };
  // Expected by hand from the rule: most significant first, each taking what is left within 500 kb.
  EXPECT_EQ(lead(1, "chromosome"), "23");
  EXPECT_EQ(lead(1, "lead_rsid"), "rs14");
  EXPECT_EQ(lead(1, "p_value"), "3.2e-1088");
  EXPECT_EQ(lead(1, "span_start"), "50000000");
  EXPECT_EQ(lead(1, "span_end"), "50400000");
  EXPECT_EQ(lead(1, "n_variants"), "2");

  EXPECT_EQ(lead(2, "lead_position"), "1000000");
  EXPECT_EQ(lead(2, "lead_rsid"), "rs11");
  EXPECT_EQ(lead(2, "span_start"), "500000");
  EXPECT_EQ(lead(2, "span_end"), "1400000");
  EXPECT_EQ(lead(2, "n_variants"), "3");

  EXPECT_EQ(lead(3, "lead_position"), "1900000");
  EXPECT_EQ(lead(3, "span_start"), "1500001");
  EXPECT_EQ(lead(3, "span_end"), "2300000");
  EXPECT_EQ(lead(3, "n_variants"), "3");

  EXPECT_EQ(lead(4, "chromosome"), "2");
  EXPECT_EQ(lead(4, "lead_position"), "3000000");
  EXPECT_EQ(lead(4, "lead_variant_id"), "2_3000000_G_A");
  EXPECT_EQ(lead(4, "lead_rsid"), "#NA");
  EXPECT_EQ(lead(4, "span_start"), "3000000");
  EXPECT_EQ(lead(4, "span_end"), "3200000");
  EXPECT_EQ(lead(4, "n_variants"), "2");
  EXPECT_EQ(lead(4, "trait"), "winter_wheeze");

  // The threshold p = 5e-8 itself is not below 5e-8; 4.99e-8 is.
  EXPECT_EQ(summary_field(options.out_prefix, "n_below_5e-8"), "5");
  EXPECT_EQ(summary_field(options.out_prefix, "n_lead_loci"), "4");
  EXPECT_NEAR(std::stod(summary_field(options.out_prefix, "max_neg_log_10_p")), 1088 - std::log10(3.2), 1e-5);
}

TEST(LeadLoci, ThresholdAndRadiusAreOptions) {
  const std::string dir = make_temp_dir("report_lead_loci_options");
  const std::string results = dir + "/scan.winter_wheeze.tsv.gz";
  write_results(results, lead_locus_rows());
  tamis::ReportOptions options;
  options.results = {results};
  options.out_prefix = dir + "/report";
  options.lead_threshold = 1e-9;  // lead B has p = 1e-9 exactly: no longer a lead
  options.locus_radius = 100000;  // A now takes only itself; 1,400,000 (p 1e-10) becomes a lead
  tamis::run_report(options);
  const auto loci = read_tsv(read_text_file(options.out_prefix + ".loci.tsv"));
  std::vector<std::string> positions;
  for (std::size_t row = 1; row < loci.size(); ++row) positions.push_back(loci[row][2] + ":" + loci[row].back());
  // By hand: D (50,000,000 alone within 100 kb), A alone, then 1,400,000 alone.
  EXPECT_EQ(positions, (std::vector<std::string>{"50000000:1", "1000000:1", "1400000:1"}));
}

// ---- plots and the page ----------------------------------------------------

class RenderedReport : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("report_rendered");
    std::vector<tamis::ResultRow> rows = null_rows(20000, 5);
    rows[5000] = make_row("1", rows[5000].position, -14.0, 58.0, "rs5000");
    rows[5001] = make_row("1", rows[5001].position, -11.0, 45.0);
    rows[15000] = make_row("3", rows[15000].position, -8.2, 33.0, "rs15000");
    write_results(dir_ + "/cohort.fev1_litres.tsv.gz", rows);
    tamis::testing::write_text_file(dir_ + "/cohort.log",
                                    "command: tamis scan --out cohort\nversion: tamis 0.1.0\nsamples: 2000 <matched>\n"
                                    "read 20000 records\nlater line\n");
    options_.results = {dir_ + "/cohort.fev1_litres.tsv.gz"};
    options_.out_prefix = dir_ + "/page";
    summary_ = tamis::run_report(options_);
  }
  static std::string dir_;
  static tamis::ReportOptions options_;
  static tamis::ReportSummary summary_;
};
std::string RenderedReport::dir_;
tamis::ReportOptions RenderedReport::options_;
tamis::ReportSummary RenderedReport::summary_;

TEST_F(RenderedReport, WritesEveryFile) {
  const std::string stem = options_.out_prefix + ".fev1_litres";
  EXPECT_EQ(summary_.written_files,
            (std::vector<std::string>{stem + ".manhattan.png", stem + ".manhattan.svg", stem + ".qq.png",
                                      stem + ".qq.svg", options_.out_prefix + ".summary.tsv",
                                      options_.out_prefix + ".loci.tsv", options_.out_prefix + ".html"}));
  for (const std::string& path : summary_.written_files) {
    EXPECT_TRUE(tamis::testing::file_exists(path)) << path;
    EXPECT_FALSE(tamis::testing::file_exists(path + ".partial")) << path;
  }
}

TEST_F(RenderedReport, PngFilesDecodeWithTheirSize) {
  struct Expected {
    std::string suffix;
    int width, height;
  };
  for (const Expected& expected : {Expected{".manhattan.png", 1800, 720}, Expected{".qq.png", 760, 760}}) {
    const std::string path = options_.out_prefix + ".fev1_litres" + expected.suffix;
    // The PNG signature, from the PNG specification (ISO/IEC 15948, section 5.2).
    const std::string bytes = read_text_file(path);
    ASSERT_GE(bytes.size(), 8u);
    EXPECT_EQ(bytes.substr(0, 8), std::string("\x89PNG\r\n\x1a\n", 8));
    cairo_surface_t* image = cairo_image_surface_create_from_png(path.c_str());
    ASSERT_EQ(cairo_surface_status(image), CAIRO_STATUS_SUCCESS) << path;
    EXPECT_EQ(cairo_image_surface_get_width(image), expected.width);
    EXPECT_EQ(cairo_image_surface_get_height(image), expected.height);
    cairo_surface_destroy(image);
  }
}

TEST_F(RenderedReport, ManhattanShowsTheGenomeWideLine) {
  // The genome-wide line is the only crimson drawn across the panel: some
  // pixel row must be crimson over most of the panel's width.
  cairo_surface_t* image =
      cairo_image_surface_create_from_png((options_.out_prefix + ".fev1_litres.manhattan.png").c_str());
  ASSERT_EQ(cairo_surface_status(image), CAIRO_STATUS_SUCCESS);
  const unsigned char* data = cairo_image_surface_get_data(image);
  const int stride = cairo_image_surface_get_stride(image);
  int widest = 0;
  for (int row = 0; row < cairo_image_surface_get_height(image); ++row) {
    int crimson = 0;
    for (int column = 0; column < cairo_image_surface_get_width(image); ++column) {
      std::uint32_t pixel;
      std::memcpy(&pixel, data + row * stride + column * 4, 4);
      const int red = (pixel >> 16) & 0xff, green = (pixel >> 8) & 0xff, blue = pixel & 0xff;
      if (std::abs(red - 179) < 30 && std::abs(green - 38) < 30 && std::abs(blue - 62) < 30) ++crimson;
    }
    widest = std::max(widest, crimson);
  }
  cairo_surface_destroy(image);
  EXPECT_GT(widest, 1200);
}

TEST_F(RenderedReport, SvgFilesParseAsXml) {
  for (const char* suffix : {".manhattan.svg", ".qq.svg"}) {
    const std::string path = options_.out_prefix + ".fev1_litres" + suffix;
    // Parsed by Python 3.11's xml.etree.ElementTree (Debian python3.11).
    const std::string command = "python3 -c \"import sys, xml.etree.ElementTree as E; "
                                "print(E.parse(sys.argv[1]).getroot().tag)\" '" + path + "'";
    int exit_code = -1;
    const std::string root = tamis::testing::capture_command(command, &exit_code);
    EXPECT_EQ(exit_code, 0) << path;
    EXPECT_EQ(root, "{http://www.w3.org/2000/svg}svg\n") << path;
  }
}

TEST_F(RenderedReport, HtmlHoldsPlotsTablesAndLogHeader) {
  const std::string html = read_text_file(options_.out_prefix + ".html");
  // Both plots inlined byte for byte.
  for (const char* suffix : {".manhattan.png", ".qq.png"}) {
    const std::string png = read_text_file(options_.out_prefix + ".fev1_litres" + suffix);
    EXPECT_NE(html.find("data:image/png;base64," + tamis::report::encode_base64(png) + "\""), std::string::npos)
        << suffix;
  }
  EXPECT_NE(html.find("<table class=\"summary\">"), std::string::npos);
  EXPECT_NE(html.find("Lead loci: p &lt; 5e-8, each lead taking the variants within 500 kb"), std::string::npos);
  EXPECT_NE(html.find("<table class=\"loci\">"), std::string::npos);
  EXPECT_NE(html.find("<td>rs5000</td>"), std::string::npos);
  EXPECT_NE(html.find("<td>rs15000</td>"), std::string::npos);
  EXPECT_NE(html.find("command: tamis scan --out cohort"), std::string::npos);
  EXPECT_NE(html.find("samples: 2000 &lt;matched&gt;"), std::string::npos);  // escaped
  EXPECT_EQ(html.find("later line"), std::string::npos);  // the log header ends at "read "
  // Self-contained: Python 3.11's html.parser finds no src or href that is not a data URI.
  const std::string check =
      "python3 -c \"import sys, html.parser as H\n"
      "class P(H.HTMLParser):\n"
      "  bad = 0\n"
      "  def handle_starttag(self, tag, attrs):\n"
      "    for name, value in attrs:\n"
      "      if name in ('src', 'href') and not value.startswith('data:'): P.bad += 1\n"
      "p = P(); p.feed(open(sys.argv[1]).read()); print(P.bad)\" '" + options_.out_prefix + ".html'";
  EXPECT_EQ(tamis::testing::capture_command(check), "0\n");
}

TEST(HtmlPieces, PThresholdsAsUsuallyWritten) {
  using tamis::report::format_p_threshold;
  EXPECT_EQ(format_p_threshold(5e-8), "5e-8");
  EXPECT_EQ(format_p_threshold(0.05 / 3000, 2), "1.7e-5");  // the set plot's line for 3,000 sets
  EXPECT_EQ(format_p_threshold(0.05 / 92, 2), "5.4e-4");    // not "0.00054", which outgrows the plot's margin
  EXPECT_EQ(format_p_threshold(0.0005, 2), "5e-4");
  EXPECT_EQ(format_p_threshold(0.01, 2), "0.01");
}

TEST(HtmlPieces, Base64MatchesRfc4648Vectors) {
  // RFC 4648, section 10 test vectors.
  using tamis::report::encode_base64;
  EXPECT_EQ(encode_base64(""), "");
  EXPECT_EQ(encode_base64("f"), "Zg==");
  EXPECT_EQ(encode_base64("fo"), "Zm8=");
  EXPECT_EQ(encode_base64("foo"), "Zm9v");
  EXPECT_EQ(encode_base64("foob"), "Zm9vYg==");
  EXPECT_EQ(encode_base64("fooba"), "Zm9vYmE=");
  EXPECT_EQ(encode_base64("foobar"), "Zm9vYmFy");
}

// ---- reader errors ---------------------------------------------------------

std::string error_text_of(const std::string& path) {
  try {
    tamis::ResultsReader reader(path);
    while (reader.next_row()) {
      reader.number(reader.column_index("beta"));
    }
  } catch (const tamis::Error& error) {
    EXPECT_EQ(error.code(), tamis::ExitCode::results_input);
    return error.what();
  }
  return "";
}

TEST(ResultsReader, WrongColumnCountNamesFileAndLine) {
  const std::string dir = make_temp_dir("report_reader_columns");
  std::string text = tamis::result_header_line();
  tamis::append_result_row(make_row("1", 100, -1, 0.5), text);
  std::string short_line;
  tamis::append_result_row(make_row("1", 200, -1, 0.5), short_line);
  text += short_line.substr(0, short_line.find_last_of('\t')) + "\n";  // one field short
  tamis::testing::write_text_file(dir + "/bad.trait.tsv", text);
  const std::string message = error_text_of(dir + "/bad.trait.tsv");
  EXPECT_NE(message.find(dir + "/bad.trait.tsv, line 3"), std::string::npos) << message;
  EXPECT_NE(message.find("found 25 tab-separated fields, expected 26"), std::string::npos) << message;
  EXPECT_NE(message.find("fix:"), std::string::npos) << message;
}

TEST(ResultsReader, MissingHeaderColumnsNamedWithTheFile) {
  const std::string dir = make_temp_dir("report_reader_header");
  std::string header = tamis::result_header_line();
  header.replace(header.find("score_chisq\t"), 12, "");
  header.replace(header.find("\tlog10p_spread"), 14, "");
  tamis::testing::write_text_file(dir + "/old.trait.tsv", header);
  const std::string message = error_text_of(dir + "/old.trait.tsv");
  EXPECT_NE(message.find(dir + "/old.trait.tsv, line 1"), std::string::npos) << message;
  EXPECT_NE(message.find("lacks the columns score_chisq, log10p_spread"), std::string::npos) << message;
}

TEST(ResultsReader, BadNumberNamesLineAndColumn) {
  const std::string dir = make_temp_dir("report_reader_number");
  std::string text = tamis::result_header_line();
  tamis::append_result_row(make_row("1", 100, -1, 0.5), text);
  std::string line;
  tamis::append_result_row(make_row("1", 200, -1, 0.5), line);
  line.replace(line.find("\t0.125\t"), 7, "\t0.12x5\t");
  text += line;
  tamis::testing::write_text_file(dir + "/typo.trait.tsv", text);
  const std::string message = error_text_of(dir + "/typo.trait.tsv");
  EXPECT_NE(message.find("typo.trait.tsv, line 3, column beta: expected a number, found '0.12x5'"), std::string::npos)
      << message;
}

TEST(ResultsReader, EmptyAndMissingFilesAreErrors) {
  const std::string dir = make_temp_dir("report_reader_empty");
  tamis::testing::write_text_file(dir + "/empty.trait.tsv", "");
  EXPECT_NE(error_text_of(dir + "/empty.trait.tsv").find("the file is empty"), std::string::npos);
  EXPECT_NE(error_text_of(dir + "/absent.trait.tsv.gz").find("cannot open the results file"), std::string::npos);
}

TEST(ResultsReader, CutShortCompressedFileIsAnError) {
  const std::string dir = make_temp_dir("report_reader_truncated");
  write_results(dir + "/whole.trait.tsv.gz", null_rows(3000, 3));
  std::string bytes = read_text_file(dir + "/whole.trait.tsv.gz");
  tamis::testing::write_text_file(dir + "/cut.trait.tsv.gz", bytes.substr(0, bytes.size() / 2));
  EXPECT_NE(error_text_of(dir + "/cut.trait.tsv.gz").find("damaged or cut short"), std::string::npos);
}

// A NUL byte once cut a line short unnoticed (the line reader saw a C string);
// now it is damage, named with the file, the line and the byte.
TEST(ResultsReader, NulByteInsideALineNamesFileLineAndByte) {
  const std::string dir = make_temp_dir("report_reader_nul_inside");
  std::string text = tamis::result_header_line();
  tamis::append_result_row(make_row("1", 100, -1, 0.5), text);
  std::string line;
  tamis::append_result_row(make_row("1", 200, -1, 0.5), line);
  const std::size_t nul_at = line.find("\t0.125\t") + 4;  // after "\t0.1"
  line.insert(nul_at, 1, '\0');
  text += line;
  tamis::append_result_row(make_row("1", 300, -1, 0.5), text);
  tamis::testing::write_text_file(dir + "/nul.trait.tsv", text);
  const std::string message = error_text_of(dir + "/nul.trait.tsv");
  EXPECT_NE(message.find(dir + "/nul.trait.tsv, line 3, byte " + std::to_string(nul_at + 1) + ":"),
            std::string::npos)
      << message;
  EXPECT_NE(message.find("NUL byte"), std::string::npos) << message;
  EXPECT_NE(message.find("fix:"), std::string::npos) << message;
}

// Before the line end of the last line, where a C-string reader lost nothing
// it could see and took the damaged file as whole; compressed, as a scan writes it.
TEST(ResultsReader, NulByteEndingTheLastLineIsAnError) {
  const std::string dir = make_temp_dir("report_reader_nul_last");
  std::string row;
  tamis::append_result_row(make_row("1", 100, -1, 0.5), row);
  const std::size_t nul_at = row.size() - 1;  // where the '\n' is
  row.insert(nul_at, 1, '\0');
  const std::string path = dir + "/nul.trait.tsv.gz";
  tamis::BgzfTextFile file(path);
  file.write(tamis::result_header_line());
  file.write(row);
  file.commit(tamis::IndexKind::none);
  const std::string message = error_text_of(path);
  EXPECT_NE(message.find(path + ", line 2, byte " + std::to_string(nul_at + 1) + ":"), std::string::npos)
      << message;
}

// Lines longer than one read of decompressed data are still read whole.
TEST(ResultsReader, LineLongerThanOneReadIsReadWhole) {
  const std::string dir = make_temp_dir("report_reader_long_line");
  tamis::ResultRow long_row = make_row("1", 100, -1, 0.5);
  long_row.other_allele = std::string(200000, 'C');
  std::string text = tamis::result_header_line();
  tamis::append_result_row(long_row, text);
  tamis::append_result_row(make_row("1", 200, -1, 0.5), text);
  tamis::testing::write_text_file(dir + "/long.trait.tsv", text);
  tamis::ResultsReader reader(dir + "/long.trait.tsv", {"other_allele", "base_pair_location"});
  ASSERT_TRUE(reader.next_row());
  EXPECT_EQ(reader.field(reader.column_index("other_allele")).size(), 200000u);
  ASSERT_TRUE(reader.next_row());
  EXPECT_EQ(reader.integer(reader.column_index("base_pair_location")), 200);
  EXPECT_FALSE(reader.next_row());
  EXPECT_EQ(reader.line_number(), 3u);
}

TEST(ResultsReader, TraitFromSidecarElseFileName) {
  const std::string dir = make_temp_dir("report_provenance");
  tamis::testing::write_text_file(dir + "/run.v2.lung.capacity.tsv.gz-meta.yaml",
                                  "data_file_name: \"x\"\ntrait_description:\n  - \"lung.capacity\"\nsample_size: 3\n");
  auto with_sidecar = tamis::report::find_provenance(dir + "/run.v2.lung.capacity.tsv.gz");
  EXPECT_EQ(with_sidecar.trait, "lung.capacity");
  EXPECT_EQ(with_sidecar.log_path, dir + "/run.v2.log");
  auto from_name = tamis::report::find_provenance(dir + "/cohort.winter_wheeze.tsv.gz");
  EXPECT_EQ(from_name.trait, "winter_wheeze");
  EXPECT_EQ(from_name.log_path, dir + "/cohort.log");
}

// ---- a large input ---------------------------------------------------------

TEST(LargeReport, TwoMillionRowsRenderQuicklyAndKeepEverySuggestivePoint) {
  const std::string dir = make_temp_dir("report_large");
  const std::string path = dir + "/big.trait_x.tsv.gz";
  constexpr std::size_t row_count = 2000000;
  std::size_t suggestive_rows = 0;
  {
    // Plain gzip at level 1 for speed; the reader takes gzip and BGZF alike.
    gzFile file = gzopen(path.c_str(), "wb1");
    ASSERT_NE(file, nullptr);
    gzputs(file, tamis::result_header_line().c_str());
    std::mt19937_64 generator(99);
    std::uniform_real_distribution<double> uniform(0.0, 1.0);
    char line[512];
    for (std::size_t row_idx = 0; row_idx < row_count; ++row_idx) {
      const int chromosome = 1 + static_cast<int>(row_idx * 22 / row_count);
      const long position = 1000 + static_cast<long>(row_idx % (row_count / 22)) * 110;
      double neg_log_10_p = -std::log10(1.0 - uniform(generator));
      if (row_idx % 9973 == 0) neg_log_10_p = 5.0 + 20.0 * uniform(generator);  // planted signals
      if (neg_log_10_p >= 5.0) ++suggestive_rows;
      std::snprintf(line, sizeof line,
                    "%d\t%ld\tA\tG\t0.01\t0.02\t0.2\t%.6g\t%d_%ld_G_A\t#NA\t2000\t#NA\tOA\tscore\t%.9g\t%.6g\t"
                    "%.6g\t#NA\t#NA\t#NA\t#NA\t#NA\t80\t1\t#NA\t#NA\n",
                    chromosome, position, std::pow(10.0, -neg_log_10_p), chromosome, position, neg_log_10_p,
                    neg_log_10_p * 4.0, std::pow(10.0, -neg_log_10_p));
      gzputs(file, line);
    }
    gzclose(file);
  }
  tamis::ReportOptions options;
  options.results = {path};
  options.out_prefix = dir + "/big";
  const auto start = std::chrono::steady_clock::now();
  const tamis::ReportSummary summary = tamis::run_report(options);
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  std::printf("report of %zu rows: %.2f s, %zu Manhattan points and %zu QQ points drawn\n", row_count, seconds,
              summary.traits.at(0).manhattan_points_drawn, summary.traits.at(0).qq_points_drawn);
  // The time is printed for whoever reads the log, never asserted: a test
  // must not depend on the machine's speed (scripts/bench.sh measures).
  EXPECT_EQ(summary.traits.at(0).n_variants, row_count);
  EXPECT_LT(summary.traits.at(0).manhattan_points_drawn, row_count / 10);
  EXPECT_LT(summary.traits.at(0).qq_points_drawn, row_count / 100);

  // Every variant at or above the suggestive line is among the drawn points.
  const tamis::report::TraitResults results = tamis::report::load_trait_results(path, 5e-8);
  const auto layout = tamis::report::lay_out_manhattan(results);
  const auto points = tamis::report::thin_manhattan_points(results, layout);
  const float suggestive_y = static_cast<float>(layout.y_of(tamis::report::suggestive_neg_log_10_p));
  const std::size_t drawn_suggestive =
      std::count_if(points.begin(), points.end(), [&](const auto& point) { return point.y <= suggestive_y; });
  EXPECT_EQ(drawn_suggestive, suggestive_rows);
  EXPECT_EQ(points.size(), summary.traits.at(0).manhattan_points_drawn);
}

// ---- variant sets (scan --sets) --------------------------------------------

tamis::SetResultRow make_set_row(const std::string& name, const std::string& chromosome, std::int64_t start,
                                 std::int64_t end, double overall_p) {
  tamis::SetResultRow row;
  row.set = name;
  row.chromosome = chromosome;
  row.start = start;
  row.end = end;
  row.n_variants = 12;
  row.total_mac = 31;
  row.overall_log_p = std::log(overall_p);
  row.burden_log_p = std::log(std::min(1.0, overall_p * 2));
  row.variance_log_p = std::log(std::min(1.0, overall_p * 3));
  row.optimal_log_p = std::log(std::min(1.0, overall_p * 1.5));
  row.cauchy_log_p = std::log(std::min(1.0, overall_p * 1.2));
  row.burden_beta = 0.2;
  row.burden_se = 0.1;
  row.burden_chisq = 4;
  row.burden_test = "score";
  row.variance_q = 17;
  row.variance_method = "davies";
  row.optimal_rho = 0.5;
  row.optimal_min_log_p = row.optimal_log_p;
  row.top_variant = name + "_top";
  row.top_variant_log_p = std::log(0.01);
  row.weights = "beta_1_25";
  row.n = 2000;
  return row;
}

// Written as the scan writes it: BGZF, one header line, tabix on columns 2-4.
void write_set_results(const std::string& path, const std::vector<tamis::SetResultRow>& rows) {
  tamis::BgzfTextFile file(path);
  file.write(tamis::set_result_header_line());
  std::string text;
  for (const tamis::SetResultRow& row : rows) tamis::append_set_result_row(row, text);
  file.write(text);
  file.commit(tamis::IndexKind::tabix_sets);
}

// Five sets whose median overall p is 0.3173105: R 4.2.2,
// pchisq(1, 1, lower.tail = FALSE) = 0.3173105 (= 2 * pnorm(-1), from
// memory), so the median chi-square is 1.0 and lambda 1 / 0.4549364.
std::vector<tamis::SetResultRow> hand_set_rows() {
  return {make_set_row("SRG0001", "1", 20000, 30000, 0.9), make_set_row("SRG0002", "1", 500000, 520000, 1e-9),
          make_set_row("SRG0003", "2", 40000, 41000, 0.31731050786291415),
          make_set_row("SRG0004", "2", 900000, 990000, 0.01), make_set_row("SRG0005", "23", 100, 5000, 0.5)};
}

class SetReport : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = make_temp_dir("report_sets");
    results_ = dir_ + "/cohort.fev1_litres.tsv.gz";
    sets_ = dir_ + "/cohort.fev1_litres.sets.tsv.gz";
    write_results(results_, null_rows(3000, 8));
    write_set_results(sets_, hand_set_rows());
    options_.out_prefix = dir_ + "/page";
  }
  std::string dir_, results_, sets_;
  tamis::ReportOptions options_;
};

TEST_F(SetReport, SiblingSetFileGivesPlotsTableAndLambda) {
  options_.results = {results_};
  options_.top_sets = 3;
  const tamis::ReportSummary summary = tamis::run_report(options_);
  const tamis::TraitReport& trait = summary.traits.at(0);
  EXPECT_EQ(trait.sets_path, sets_);
  EXPECT_EQ(trait.n_sets, 5u);
  // R 4.2.2: 1 / qchisq(0.5, 1) = 2.198109 (the median chi-square is 1, see hand_set_rows).
  EXPECT_NEAR(trait.set_lambda, 1.0 / 0.45493642311957283, 1e-6);

  const std::string stem = options_.out_prefix + ".fev1_litres";
  for (const char* suffix : {".sets.manhattan.png", ".sets.manhattan.svg", ".sets.qq.png", ".sets.qq.svg"}) {
    EXPECT_NE(std::find(summary.written_files.begin(), summary.written_files.end(), stem + suffix),
              summary.written_files.end())
        << suffix;
  }
  for (const char* suffix : {".sets.manhattan.png", ".sets.qq.png"}) {
    cairo_surface_t* image = cairo_image_surface_create_from_png((stem + suffix).c_str());
    EXPECT_EQ(cairo_surface_status(image), CAIRO_STATUS_SUCCESS) << suffix;
    cairo_surface_destroy(image);
  }

  // The top three sets by overall p, with the p-values as the file wrote them.
  const auto table = read_tsv(read_text_file(options_.out_prefix + ".top_sets.tsv"));
  ASSERT_EQ(table.size(), 4u);
  EXPECT_EQ(table[0], (std::vector<std::string>{"trait", "set", "chromosome", "start", "end", "n_variants",
                                                "total_mac", "burden_p", "variance_p", "optimal_p", "cauchy_p",
                                                "overall_p", "top_variant"}));
  EXPECT_EQ(table[1], (std::vector<std::string>{"fev1_litres", "SRG0002", "1", "500000", "520000", "12", "31",
                                                "2e-09", "3e-09", "1.5e-09", "1.2e-09", "1e-09", "SRG0002_top"}));
  EXPECT_EQ(table[2][1], "SRG0004");
  EXPECT_EQ(table[3][1], "SRG0003");

  const std::string html = read_text_file(options_.out_prefix + ".html");
  EXPECT_NE(html.find("<table class=\"sets\">"), std::string::npos);
  EXPECT_NE(html.find("<td>SRG0002</td><td>1:500000-520000</td>"), std::string::npos);
  EXPECT_NE(html.find("The 3 sets of smallest overall p of 5"), std::string::npos);
  EXPECT_NE(html.find("\u03bb of overall p = 2.1981"), std::string::npos);
  EXPECT_NE(html.find("the line is p = 0.01 (0.05 divided by the number of sets)"), std::string::npos);
  const std::string png = read_text_file(stem + ".sets.manhattan.png");
  EXPECT_NE(html.find("data:image/png;base64," + tamis::report::encode_base64(png) + "\""), std::string::npos);
}

TEST_F(SetReport, SetFileListedInResultsIsMatchedToItsTrait) {
  options_.results = {sets_, results_};  // as `--results cohort.*.tsv.gz` lists them
  const tamis::ReportSummary summary = tamis::run_report(options_);
  ASSERT_EQ(summary.traits.size(), 1u);
  EXPECT_EQ(summary.traits.at(0).trait, "fev1_litres");
  EXPECT_EQ(summary.traits.at(0).sets_path, sets_);
  EXPECT_EQ(read_tsv(read_text_file(options_.out_prefix + ".top_sets.tsv")).size(), 6u);
  const std::string html = read_text_file(options_.out_prefix + ".html");
  EXPECT_NE(html.find("<td>X:100-5000</td>"), std::string::npos) << "GWAS-SSF code 23 shown as X";
  EXPECT_EQ(html.find("smallest overall p of"), std::string::npos) << "all five sets listed";
}

TEST_F(SetReport, SetFileWithoutItsTraitIsAUsageError) {
  write_results(dir_ + "/cohort.winter_wheeze.tsv.gz", null_rows(100, 9));
  options_.results = {sets_, dir_ + "/cohort.winter_wheeze.tsv.gz"};
  try {
    tamis::run_report(options_);
    FAIL() << "expected a usage error";
  } catch (const tamis::Error& error) {
    EXPECT_EQ(error.code(), tamis::ExitCode::usage);
    EXPECT_NE(std::string(error.what()).find(sets_), std::string::npos) << error.what();
  }
}

TEST_F(SetReport, WithoutSetFilesNoSetOutputs) {
  const std::string plain = dir_ + "/other.fev1_litres.tsv.gz";
  write_results(plain, null_rows(100, 10));
  options_.results = {plain};
  const tamis::ReportSummary summary = tamis::run_report(options_);
  EXPECT_TRUE(summary.traits.at(0).sets_path.empty());
  EXPECT_FALSE(tamis::testing::file_exists(options_.out_prefix + ".top_sets.tsv"));
  EXPECT_EQ(read_text_file(options_.out_prefix + ".html").find("Variant sets"), std::string::npos);
}

// A damaged set file: the error names the file, the line and the column.
std::string set_report_error(const std::string& results, tamis::ReportOptions options) {
  options.results = {results};
  try {
    tamis::run_report(options);
  } catch (const tamis::Error& error) {
    EXPECT_EQ(error.code(), tamis::ExitCode::results_input);
    return error.what();
  }
  ADD_FAILURE() << "expected an error";
  return "";
}

TEST_F(SetReport, DamagedSetFileNamesFileLineAndColumn) {
  const std::string header = tamis::set_result_header_line();
  std::string good;
  tamis::append_set_result_row(make_set_row("SRG0001", "1", 20000, 30000, 0.2), good);

  std::string short_line = good.substr(0, good.find("\tbeta_1_25")) + "\n";
  tamis::testing::write_text_file(sets_, header + good + short_line);
  std::string message = set_report_error(results_, options_);
  EXPECT_NE(message.find(sets_ + ", line 3"), std::string::npos) << message;

  std::string bad_p = good;
  bad_p.replace(bad_p.find("\t0.2\t"), 5, "\t0.2x\t");
  tamis::testing::write_text_file(sets_, header + good + good + bad_p);
  message = set_report_error(results_, options_);
  EXPECT_NE(message.find(sets_ + ", line 4, column overall_p"), std::string::npos) << message;

  std::string reversed = good;
  reversed.replace(reversed.find("\t20000\t30000\t"), 13, "\t30000\t20000\t");
  tamis::testing::write_text_file(sets_, header + reversed);
  message = set_report_error(results_, options_);
  EXPECT_NE(message.find(sets_ + ", line 2, column end"), std::string::npos) << message;

  tamis::testing::write_text_file(sets_, "set\tchromosome\tstart\n");
  message = set_report_error(results_, options_);
  EXPECT_NE(message.find(sets_), std::string::npos) << message;
  EXPECT_NE(message.find("overall_p"), std::string::npos) << "the missing columns are named: " << message;
}

}  // namespace
