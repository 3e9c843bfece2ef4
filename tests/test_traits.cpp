// Tests for the trait table: parsing, typing, sample matching and covariate
// encoding. Every fixture is a real file written to a fresh temporary folder.

#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <initializer_list>
#include <string>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/trait_table.hpp"

namespace tamis {
namespace {

using testing::make_temp_dir;
using testing::write_text_file;

std::string write_fixture(const std::string& test_name, const std::string& file_name,
                          const std::string& text) {
  const std::string path = make_temp_dir("traits_" + test_name) + "/" + file_name;
  write_text_file(path, text);
  return path;
}

TraitTable load_text(const std::string& test_name, const std::string& text,
                     const TableOptions& options = TableOptions{},
                     const std::string& file_name = "table.tsv") {
  return TraitTable::load(write_fixture(test_name, file_name, text), options);
}

// Runs `action`, expects a tamis::Error with `code`, and checks that its
// message holds every piece.
void expect_error(const std::function<void()>& action, ExitCode code,
                  std::initializer_list<std::string> pieces) {
  try {
    action();
  } catch (const Error& error) {
    EXPECT_EQ(static_cast<int>(error.code()), static_cast<int>(code)) << error.what();
    const std::string message = error.what();
    for (const std::string& piece : pieces) {
      EXPECT_NE(message.find(piece), std::string::npos)
          << "missing \"" << piece << "\" in: " << message;
    }
    return;
  }
  ADD_FAILURE() << "expected a tamis::Error";
}

// Two tables are the same when every sample, column, type, value, token and
// missing flag agrees.
void expect_same_table(const TraitTable& actual, const TraitTable& expected) {
  EXPECT_EQ(actual.sample_column_name(), expected.sample_column_name());
  EXPECT_EQ(actual.sample_ids(), expected.sample_ids());
  ASSERT_EQ(actual.column_names(), expected.column_names());
  for (const std::string& name : expected.column_names()) {
    const TableColumn& got = actual.column(name);
    const TableColumn& want = expected.column(name);
    EXPECT_EQ(got.numeric, want.numeric) << name;
    EXPECT_EQ(got.tokens, want.tokens) << name;
    EXPECT_EQ(got.missing, want.missing) << name;
    ASSERT_EQ(got.values.size(), want.values.size()) << name;
    for (std::size_t row_idx = 0; row_idx < want.values.size(); ++row_idx) {
      if (std::isnan(want.values[row_idx])) {
        EXPECT_TRUE(std::isnan(got.values[row_idx])) << name << " row " << row_idx;
      } else {
        EXPECT_EQ(got.values[row_idx], want.values[row_idx]) << name << " row " << row_idx;
      }
    }
  }
}

// The design column called `name`, one value per analysis sample.
std::vector<double> column_of(const AnalysisSet& set, const std::string& name) {
  std::vector<double> values;
  for (std::size_t column_idx = 0; column_idx < set.design_names.size(); ++column_idx) {
    if (set.design_names[column_idx] != name) continue;
    for (Eigen::Index row_idx = 0; row_idx < set.design.rows(); ++row_idx) {
      values.push_back(set.design(row_idx, static_cast<Eigen::Index>(column_idx)));
    }
  }
  EXPECT_FALSE(values.empty()) << "no design column " << name;
  return values;
}

// ---------------------------------------------------------------- parsing

TEST(TraitTableParse, DetectsTabSeparatedFromHeader) {
  // A comma inside a TSV value is text, not a separator: the header decides.
  const TraitTable table = load_text("tsv", "iid\tbmi\tsite\n"
                                            "s1\t22.5\tnorth,east\n"
                                            "s2\t30\tsouth\n");
  EXPECT_EQ(table.sample_column_name(), "iid");
  EXPECT_EQ(table.sample_ids(), (std::vector<std::string>{"s1", "s2"}));
  EXPECT_EQ(table.column_names(), (std::vector<std::string>{"bmi", "site"}));
  EXPECT_EQ(table.line_numbers(), (std::vector<std::size_t>{2, 3}));
  const TableColumn& bmi = table.column("bmi");
  EXPECT_TRUE(bmi.numeric);
  EXPECT_EQ(bmi.values, (std::vector<double>{22.5, 30.0}));
  const TableColumn& site = table.column("site");
  EXPECT_FALSE(site.numeric);
  EXPECT_EQ(site.tokens, (std::vector<std::string>{"north,east", "south"}));
}

TEST(TraitTableParse, DetectsCommaSeparatedWithoutTabInHeader) {
  const TraitTable table =
      load_text("csv", "iid,bmi,age\ns1,22.5,40\ns2,30,51\n", TableOptions{}, "table.csv");
  EXPECT_EQ(table.column_names(), (std::vector<std::string>{"bmi", "age"}));
  EXPECT_EQ(table.column("age").values, (std::vector<double>{40.0, 51.0}));
}

TEST(TraitTableParse, ReadsQuotedCsvFields) {
  // Quoting rules of RFC 4180 (common practice): a quoted field may hold the
  // delimiter, and "" inside it stands for one quote.
  const TraitTable table = load_text("quoted",
                                     "\"iid\",\"height, cm\",note\n"
                                     "s1,\"170.5\",\"tall, \"\"very\"\" tall\"\n"
                                     "\"s,2\",165,plain\n"
                                     "s3,\"\",\"\"\n",
                                     TableOptions{}, "table.csv");
  EXPECT_EQ(table.sample_ids(), (std::vector<std::string>{"s1", "s,2", "s3"}));
  EXPECT_EQ(table.column_names(), (std::vector<std::string>{"height, cm", "note"}));
  const TableColumn& height = table.column("height, cm");
  EXPECT_TRUE(height.numeric);
  EXPECT_EQ(height.values[0], 170.5);
  EXPECT_EQ(height.values[1], 165.0);
  EXPECT_TRUE(height.missing[2]);
  const TableColumn& note = table.column("note");
  EXPECT_FALSE(note.numeric);
  EXPECT_EQ(note.tokens[0], "tall, \"very\" tall");
  EXPECT_EQ(note.tokens[1], "plain");
  EXPECT_TRUE(note.missing[2]);
}

TEST(TraitTableParse, UntidyFileGivesTheSameTableAsTheCleanOne) {
  const std::string clean = "iid,bmi,site,age\n"
                            "s1,22.5,north,40\n"
                            "s2,NA,south,51\n"
                            "s3,27,north,\n";
  // UTF-8 byte order mark, CRLF endings, spaces at line ends and around
  // fields, a blank line, trailing spreadsheet rows and no final newline.
  const std::string untidy = "\xEF\xBB\xBFiid , bmi,site ,age  \r\n"
                             "s1,  22.5 ,north,40 \r\n"
                             "\r\n"
                             "  s2,NA, south ,51\r\n"
                             "   \r\n"
                             "s3 ,27,\"north\",  \r\n"
                             ",,,\r\n"
                             ",,,";
  const TraitTable clean_table = load_text("clean", clean, TableOptions{}, "clean.csv");
  const TraitTable untidy_table = load_text("untidy", untidy, TableOptions{}, "untidy.csv");
  expect_same_table(untidy_table, clean_table);
  // Line numbers stay the physical lines, so messages point at the right place.
  EXPECT_EQ(untidy_table.line_numbers(), (std::vector<std::size_t>{2, 4, 6}));
}

TEST(TraitTableParse, UntidyTabSeparatedFileGivesTheSameTable) {
  const std::string clean = "iid\tbmi\tsite\ns1\t22.5\tnorth\ns2\t\tsouth\n";
  const std::string untidy = "\xEF\xBB\xBFiid\tbmi \tsite\r\ns1 \t 22.5\tnorth  \r\ns2\t\tsouth";
  expect_same_table(load_text("untidy_tsv", untidy), load_text("clean_tsv", clean));
}

TEST(TraitTableParse, DefaultMissingTokens) {
  const TraitTable table = load_text("missing_default", "iid\tx\ns1\tNA\ns2\tna\ns3\tNaN\n"
                                                        "s4\t.\ns5\t\ns6\t2\n");
  const TableColumn& x = table.column("x");
  EXPECT_TRUE(x.numeric);
  EXPECT_EQ(x.missing, (std::vector<bool>{true, true, true, true, true, false}));
  for (std::size_t row_idx = 0; row_idx < 5; ++row_idx) EXPECT_TRUE(std::isnan(x.values[row_idx]));
  EXPECT_EQ(x.values[5], 2.0);
}

TEST(TraitTableParse, CustomMissingTokensReplaceTheDefaults) {
  TableOptions options;
  options.missing_tokens = {"-9", "unknown"};
  const TraitTable table =
      load_text("missing_custom", "iid\tx\tgroup\ns1\t-9\tunknown\ns2\t1.5\tcase\n"
                                  "s3\t-9.5\tcontrol\n",
                options);
  const TableColumn& x = table.column("x");
  EXPECT_EQ(x.missing, (std::vector<bool>{true, false, false}));
  EXPECT_EQ(x.values[2], -9.5);
  const TableColumn& group = table.column("group");
  EXPECT_FALSE(group.numeric);
  EXPECT_EQ(group.missing, (std::vector<bool>{true, false, false}));
  // With the defaults replaced, "NA" is no longer missing but stray text.
  expect_error([&] { load_text("missing_custom_na", "iid\tx\ns1\t1\ns2\t2\ns3\tNA\n", options); },
               ExitCode::table_input, {"line 4", "\"x\"", "\"NA\""});
}

TEST(TraitTableParse, NumberFormsAndTextForms) {
  const TraitTable table = load_text("numbers", "iid\tx\tcode\ns1\t1e-3\t0x10\ns2\t-2\tinf\n"
                                                "s3\t+3.5\tnan\ns4\t.25\t7\n");
  const TableColumn& x = table.column("x");
  EXPECT_TRUE(x.numeric);
  EXPECT_EQ(x.values, (std::vector<double>{1e-3, -2.0, 3.5, 0.25}));
  // Hexadecimal and non-finite spellings are not trait values: three of four
  // are text, so the column is categorical.
  const TableColumn& code = table.column("code");
  EXPECT_FALSE(code.numeric);
  EXPECT_EQ(code.tokens, (std::vector<std::string>{"0x10", "inf", "nan", "7"}));
}

TEST(TraitTableParse, HalfTextColumnIsCategoricalAndAllMissingIsNumeric) {
  const TraitTable table =
      load_text("typing", "iid\tbatch\tempty\ns1\t1\tNA\ns2\tB\t.\ns3\tNA\t\ns4\t2\tNA\n"
                          "s5\tC\tNA\n");
  const TableColumn& batch = table.column("batch");
  EXPECT_FALSE(batch.numeric);
  EXPECT_EQ(batch.tokens, (std::vector<std::string>{"1", "B", "", "2", "C"}));
  EXPECT_EQ(batch.missing, (std::vector<bool>{false, false, true, false, false}));
  const TableColumn& empty = table.column("empty");
  EXPECT_TRUE(empty.numeric);
  EXPECT_EQ(empty.missing, (std::vector<bool>(5, true)));
}

TEST(TraitTableParse, StrayTextInNumericColumnNamesFileLineColumnAndToken) {
  const std::string text = "iid\tage\ns1\t40\ns2\t51\ns3\tforty\ns4\t38\n";
  const std::string path = write_fixture("stray", "cohort_traits.tsv", text);
  expect_error([&] { TraitTable::load(path, TableOptions{}); }, ExitCode::table_input,
               {"cohort_traits.tsv", "line 4", "\"age\"", "\"forty\"", "--missing-tokens"});
}

TEST(TraitTableParse, WrongFieldCountNamesLineExpectedAndFound) {
  const std::string path = write_fixture("fields", "short_row.csv", "iid,a,b\ns1,1,2\ns2,3\n");
  expect_error([&] { TraitTable::load(path, TableOptions{}); }, ExitCode::table_input,
               {"short_row.csv", "line 3", "expected 3", "found 2"});
}

TEST(TraitTableParse, DuplicateSampleIdNamesBothLines) {
  const std::string path =
      write_fixture("duplicate", "dup.tsv", "iid\tx\ns1\t1\ns2\t2\n\ns1\t3\n");
  expect_error([&] { TraitTable::load(path, TableOptions{}); }, ExitCode::table_input,
               {"dup.tsv", "\"s1\"", "line 2", "line 5"});
}

TEST(TraitTableParse, EmptySampleIdIsAnError) {
  const std::string path = write_fixture("empty_id", "empty_id.csv", "iid,x\ns1,1\n,2\n");
  expect_error([&] { TraitTable::load(path, TableOptions{}); }, ExitCode::table_input,
               {"empty_id.csv", "line 3", "empty"});
}

TEST(TraitTableParse, SampleColumnByName) {
  TableOptions options;
  options.sample_column = "sample";
  const TraitTable table = load_text("sample_column", "bmi\tsample\tage\n22\tA1\t40\n25\tA2\t41\n",
                                     options);
  EXPECT_EQ(table.sample_column_name(), "sample");
  EXPECT_EQ(table.sample_ids(), (std::vector<std::string>{"A1", "A2"}));
  EXPECT_EQ(table.column_names(), (std::vector<std::string>{"bmi", "age"}));
}

TEST(TraitTableParse, UnknownSampleColumnListsTheColumns) {
  TableOptions options;
  options.sample_column = "IID";
  expect_error([&] { load_text("unknown_sample", "iid\tbmi\tage\ns1\t1\t2\n", options); },
               ExitCode::table_input, {"\"IID\"", "iid, bmi, age", "--sample-column"});
}

TEST(TraitTableParse, UnknownColumnListsTheColumns) {
  const TraitTable table = load_text("unknown_column", "iid\tbmi\tage\ns1\t1\t2\n");
  expect_error([&] { table.column("height"); }, ExitCode::table_input,
               {"\"height\"", "bmi, age"});
}

TEST(TraitTableParse, EmptyAndHeaderOnlyAndMissingFiles) {
  expect_error([&] { load_text("empty_file", ""); }, ExitCode::table_input, {"empty"});
  expect_error([&] { load_text("blank_file", "\n  \n"); }, ExitCode::table_input, {"empty"});
  expect_error([&] { load_text("header_only", "iid\tbmi\n"); }, ExitCode::table_input,
               {"no data rows"});
  const std::string missing_path = make_temp_dir("traits_no_file") + "/absent.tsv";
  expect_error([&] { TraitTable::load(missing_path, TableOptions{}); }, ExitCode::table_input,
               {"absent.tsv", "--traits"});
}

TEST(TraitTableParse, BadQuotingAndBadHeaders) {
  expect_error([&] { load_text("open_quote", "iid,x\ns1,\"1\n", TableOptions{}, "q.csv"); },
               ExitCode::table_input, {"q.csv", "line 2", "quote"});
  expect_error([&] { load_text("after_quote", "iid,x\ns1,\"1\"2\n", TableOptions{}, "q.csv"); },
               ExitCode::table_input, {"line 2", "after its closing"});
  expect_error([&] { load_text("dup_header", "iid\tx\tx\ns1\t1\t2\n"); }, ExitCode::table_input,
               {"line 1", "\"x\"", "twice"});
  expect_error([&] { load_text("unnamed", "iid\t\tx\ns1\t1\t2\n"); }, ExitCode::table_input,
               {"line 1", "column 2"});
}

// ---------------------------------------------------------------- analysis sets

// An invented cohort: seven table rows, six genotype samples in a different
// order, one missing trait, one missing covariate.
const char* const kCohort =
    "iid\tldl\tage\tsite\n"
    "p1\t3.1\t40\tnorth\n"
    "p2\tNA\t41\tsouth\n"
    "p3\t2.8\tNA\tnorth\n"
    "p4\t3.9\t55\tsouth\n"
    "p5\t4.2\t61\teast\n"
    "p6\t2.2\t38\tnorth\n"
    "p7\t3.3\t47\tsouth\n";

TEST(AnalysisSetBuild, MatchesSamplesAndCountsEveryDrop) {
  const TraitTable table = load_text("cohort", kCohort);
  // p9 has genotypes only; p6 and p7 are in the table only.
  const std::vector<std::string> genotype_samples{"p5", "p1", "p9", "p2", "p3", "p4"};
  AnalysisRequest request;
  request.trait = "ldl";
  request.covariates = {"age"};
  const AnalysisSet set = build_analysis_set(table, genotype_samples, request);
  EXPECT_EQ(set.trait, "ldl");
  EXPECT_EQ(set.kind, TraitKind::quantitative);
  EXPECT_EQ(set.accounting.genotype_samples, 6u);
  EXPECT_EQ(set.accounting.table_rows, 7u);
  EXPECT_EQ(set.accounting.matched, 5u);
  EXPECT_EQ(set.accounting.genotype_only, 1u);
  EXPECT_EQ(set.accounting.table_only, 2u);
  EXPECT_EQ(set.accounting.missing_trait, 1u);      // p2
  EXPECT_EQ(set.accounting.missing_covariate, 1u);  // p3
  EXPECT_EQ(set.accounting.analysed, 3u);
  // Genotype order, ascending: p5 (0), p1 (1), p4 (5).
  EXPECT_EQ(set.genotype_index, (std::vector<std::size_t>{0, 1, 5}));
  ASSERT_EQ(set.y.size(), 3);
  EXPECT_EQ(set.y(0), 4.2);
  EXPECT_EQ(set.y(1), 3.1);
  EXPECT_EQ(set.y(2), 3.9);
  EXPECT_EQ(set.design_names, (std::vector<std::string>{"intercept", "age"}));
  ASSERT_EQ(set.design.rows(), 3);
  ASSERT_EQ(set.design.cols(), 2);
  EXPECT_EQ(column_of(set, "intercept"), (std::vector<double>{1, 1, 1}));
  EXPECT_EQ(column_of(set, "age"), (std::vector<double>{61, 40, 55}));
  EXPECT_TRUE(set.reference_levels.empty());
  EXPECT_EQ(set.case_count, 0u);
  EXPECT_EQ(set.control_count, 0u);
}

TEST(AnalysisSetBuild, TextCovariateBecomesIndicatorsAgainstMostFrequentLevel) {
  // Among the analysis samples: north x3, south x2, east x1 -> reference north.
  const TraitTable table = load_text("indicators", kCohort);
  const std::vector<std::string> genotype_samples{"p1", "p2", "p3", "p4", "p5", "p6", "p7"};
  AnalysisRequest request;
  request.trait = "ldl";
  request.covariates = {"site", "age"};
  const AnalysisSet set = build_analysis_set(table, genotype_samples, request);
  // p2 lacks the trait, p3 lacks age: p1 north, p4 south, p5 east, p6 north, p7 south.
  EXPECT_EQ(set.genotype_index, (std::vector<std::size_t>{0, 3, 4, 5, 6}));
  EXPECT_EQ(set.design_names,
            (std::vector<std::string>{"intercept", "site=east", "site=south", "age"}));
  EXPECT_EQ(set.reference_levels.at("site"), "north");
  EXPECT_EQ(column_of(set, "site=east"), (std::vector<double>{0, 0, 1, 0, 0}));
  EXPECT_EQ(column_of(set, "site=south"), (std::vector<double>{0, 1, 0, 0, 1}));
  EXPECT_EQ(column_of(set, "age"), (std::vector<double>{40, 55, 61, 38, 47}));
}

TEST(AnalysisSetBuild, ReferenceLevelTieGoesToTheLevelThatSortsFirst) {
  // In the whole table C is the most frequent level (4 rows), but two of its
  // rows lack the trait.
  const std::string text = "iid\ty\tarm\n"
                           "q1\t1.0\tC\n"
                           "q2\t2.0\tB\n"
                           "q3\t3.5\tA\n"
                           "q4\tNA\tC\n"
                           "q5\t1.5\tB\n"
                           "q6\t2.5\tC\n"
                           "q7\t0.5\tA\n"
                           "q8\t4.0\tB\n"
                           "q9\tNA\tC\n";
  const TraitTable table = load_text("tie", text);
  AnalysisRequest request;
  request.trait = "y";
  request.covariates = {"arm"};
  // Frequencies are counted among the analysis samples: B x3 beats C x2 and A x2.
  const AnalysisSet frequency_set =
      build_analysis_set(table, {"q1", "q2", "q3", "q4", "q5", "q6", "q7", "q8", "q9"}, request);
  EXPECT_EQ(frequency_set.reference_levels.at("arm"), "B");
  EXPECT_EQ(frequency_set.design_names,
            (std::vector<std::string>{"intercept", "arm=A", "arm=C"}));
  // Without q8: A x2, B x2, C x2, a three-way tie won by "A", which sorts first.
  const AnalysisSet tie_set =
      build_analysis_set(table, {"q1", "q2", "q3", "q4", "q5", "q6", "q7", "q9"}, request);
  EXPECT_EQ(tie_set.reference_levels.at("arm"), "A");
  EXPECT_EQ(tie_set.design_names, (std::vector<std::string>{"intercept", "arm=B", "arm=C"}));
  EXPECT_EQ(column_of(tie_set, "arm=B"), (std::vector<double>{0, 1, 0, 1, 0, 0}));
  EXPECT_EQ(column_of(tie_set, "arm=C"), (std::vector<double>{1, 0, 0, 0, 1, 0}));
}

TEST(AnalysisSetBuild, SingleLevelTextCovariateAddsNoColumns) {
  const std::string text = "iid\ty\tarm\nr1\t1\tX\nr2\t2\tX\nr3\t5\tY\n";
  const TraitTable table = load_text("single_level", text);
  AnalysisRequest request;
  request.trait = "y";
  request.covariates = {"arm"};
  const AnalysisSet set = build_analysis_set(table, {"r1", "r2"}, request);
  EXPECT_EQ(set.design_names, (std::vector<std::string>{"intercept"}));
  EXPECT_EQ(set.design.cols(), 1);
  EXPECT_EQ(set.reference_levels.at("arm"), "X");
}

TEST(AnalysisSetBuild, DetectsBinaryTraitAndCountsCasesAndControls) {
  const std::string text = "iid\tasthma\tage\nb1\t1\t30\nb2\t0\t31\nb3\t0\t32\nb4\tNA\t33\n"
                           "b5\t1\t34\nb6\t0\t35\n";
  const TraitTable table = load_text("binary", text);
  AnalysisRequest request;
  request.trait = "asthma";
  const std::vector<std::string> genotype_samples{"b1", "b2", "b3", "b4", "b5", "b6"};
  const AnalysisSet set = build_analysis_set(table, genotype_samples, request);
  EXPECT_EQ(set.kind, TraitKind::binary);
  EXPECT_EQ(set.case_count, 2u);
  EXPECT_EQ(set.control_count, 3u);
  EXPECT_EQ(set.accounting.analysed, 5u);
  EXPECT_EQ(set.design_names, (std::vector<std::string>{"intercept"}));
  // Asked to treat the 0/1 trait as quantitative, it is.
  request.kind_override = TraitKind::quantitative;
  const AnalysisSet forced = build_analysis_set(table, genotype_samples, request);
  EXPECT_EQ(forced.kind, TraitKind::quantitative);
  EXPECT_EQ(forced.case_count, 0u);
}

TEST(AnalysisSetBuild, BinaryOverrideOfTraitNotCodedZeroOneIsAnError) {
  const std::string text = "iid\tstatus\nc1\t1\nc2\t2\nc3\t1\nc4\t2\n";
  const std::string path = write_fixture("binary_override", "status.tsv", text);
  const TraitTable table = TraitTable::load(path, TableOptions{});
  AnalysisRequest request;
  request.trait = "status";
  const std::vector<std::string> genotype_samples{"c1", "c2", "c3", "c4"};
  // Coded 1/2, the trait is quantitative unless declared binary.
  EXPECT_EQ(build_analysis_set(table, genotype_samples, request).kind, TraitKind::quantitative);
  request.kind_override = TraitKind::binary;
  expect_error([&] { build_analysis_set(table, genotype_samples, request); }, ExitCode::model,
               {"status.tsv", "line 3", "\"status\"", "value 2", "0 (control) and 1 (case)"});
}

TEST(AnalysisSetBuild, ConstantTraitAndOneSidedBinaryTraitAreModelErrors) {
  const std::string text = "iid\tflat\tall_cases\tno_cases\nd1\t5\t1\t0\nd2\t5\t1\t0\n"
                           "d3\t5\t1\t0\nd4\tNA\t0\t1\n";
  const TraitTable table = load_text("constant", text);
  const std::vector<std::string> genotype_samples{"d1", "d2", "d3"};
  AnalysisRequest request;
  request.trait = "flat";
  expect_error([&] { build_analysis_set(table, genotype_samples, request); }, ExitCode::model,
               {"\"flat\"", "same value (5)", "all 3"});
  request.trait = "all_cases";
  expect_error([&] { build_analysis_set(table, genotype_samples, request); }, ExitCode::model,
               {"\"all_cases\"", "3 cases and 0 controls"});
  request.trait = "no_cases";
  expect_error([&] { build_analysis_set(table, genotype_samples, request); }, ExitCode::model,
               {"\"no_cases\"", "0 cases and 3 controls"});
}

TEST(AnalysisSetBuild, NoSampleOverlapShowsIdsFromBothSides) {
  const TraitTable table = load_text("no_overlap", "iid\ty\nT01\t1\nT02\t2\nT03\t3\nT04\t4\n");
  AnalysisRequest request;
  request.trait = "y";
  expect_error(
      [&] { build_analysis_set(table, {"0_T01", "0_T02", "0_T03", "0_T04"}, request); },
      ExitCode::table_input,
      {"\"0_T01\", \"0_T02\", \"0_T03\", ...", "\"T01\", \"T02\", \"T03\", ...", "--sample-column"});
}

TEST(AnalysisSetBuild, NoCompleteSampleIsAModelError) {
  const TraitTable table = load_text("none_complete", "iid\ty\tage\ne1\t1\tNA\ne2\tNA\t3\n");
  AnalysisRequest request;
  request.trait = "y";
  request.covariates = {"age"};
  expect_error([&] { build_analysis_set(table, {"e1", "e2"}, request); }, ExitCode::model,
               {"\"y\"", "of 2", "1 lack the trait", "1 lack a covariate"});
}

TEST(AnalysisSetBuild, RequestProblems) {
  const TraitTable table = load_text("requests", kCohort);
  const std::vector<std::string> genotype_samples{"p1", "p4", "p5"};
  AnalysisRequest request;
  request.trait = "ldl";
  request.covariates = {"age", "ldl"};
  expect_error([&] { build_analysis_set(table, genotype_samples, request); }, ExitCode::usage,
               {"\"ldl\"", "covariate"});
  request.covariates = {"age", "site", "age"};
  expect_error([&] { build_analysis_set(table, genotype_samples, request); }, ExitCode::usage,
               {"\"age\"", "twice"});
  request.covariates = {"weight"};
  expect_error([&] { build_analysis_set(table, genotype_samples, request); },
               ExitCode::table_input, {"\"weight\"", "ldl, age, site"});
  request.covariates = {};
  request.trait = "site";
  expect_error([&] { build_analysis_set(table, genotype_samples, request); },
               ExitCode::table_input, {"\"site\"", "text", "line 2"});
  request.trait = "height";
  expect_error([&] { build_analysis_set(table, genotype_samples, request); },
               ExitCode::table_input, {"\"height\"", "ldl, age, site"});
}

}  // namespace
}  // namespace tamis
