// Independent signals: selection recovery and credible-set coverage on
// simulated loci (in-process, through the library), and `tamis signals` end
// to end (1 and 4 threads, bad inputs). The comparison with R's lm/glm is in
// tests/reference/check_signals_against_r.R.
#include <gtest/gtest.h>

#include <cmath>
#include <algorithm>
#include <cstdio>
#include <map>
#include <random>

#include "scan/conditioning.hpp"
#include "scan/signal_selection.hpp"
#include "tamis/errors.hpp"
#include "support/test_support.hpp"

namespace tamis {
namespace {

// A window of `blocks` haplotype blocks of `block_size` variants. Each
// haplotype carries, per block, a latent Gaussian walk along the variants
// (correlation `rho` between neighbours); an allele is present where the
// walk lies above its frequency's quantile, so LD decays with distance
// inside a block and blocks are independent.
struct LocusSimulation {
  std::size_t samples = 1500;
  std::size_t blocks = 2;
  std::size_t block_size = 24;
  double rho = 0.95;
};

WindowVariants simulate_window(const LocusSimulation& settings, std::mt19937_64& random) {
  const std::size_t m = settings.blocks * settings.block_size;
  std::uniform_real_distribution<double> frequency(0.15, 0.5);
  std::normal_distribution<double> normal(0.0, 1.0);
  std::vector<double> cut(m);
  for (double& value : cut) {
    // Upper quantile of the frequency by bisection of erfc (no library quantile needed).
    const double f = frequency(random);
    double low = -6.0, high = 6.0;
    for (int step = 0; step < 60; ++step) {
      const double mid = 0.5 * (low + high);
      (0.5 * std::erfc(mid / std::sqrt(2.0)) > f ? low : high) = mid;
    }
    value = 0.5 * (low + high);
  }
  WindowVariants window;
  window.dosages.setZero(static_cast<Eigen::Index>(settings.samples), static_cast<Eigen::Index>(m));
  const double innovation = std::sqrt(1.0 - settings.rho * settings.rho);
  for (std::size_t sample_idx = 0; sample_idx < settings.samples; ++sample_idx) {
    for (int copy = 0; copy < 2; ++copy) {
      for (std::size_t block_idx = 0; block_idx < settings.blocks; ++block_idx) {
        double walk = normal(random);
        for (std::size_t offset = 0; offset < settings.block_size; ++offset) {
          if (offset > 0) walk = settings.rho * walk + innovation * normal(random);
          const std::size_t variant = block_idx * settings.block_size + offset;
          if (walk > cut[variant]) window.dosages(static_cast<Eigen::Index>(sample_idx), static_cast<Eigen::Index>(variant)) += 1.0;
        }
      }
    }
  }
  for (std::size_t variant = 0; variant < m; ++variant) {
    const double sum = window.dosages.col(static_cast<Eigen::Index>(variant)).sum();
    window.minor_allele_counts.push_back(std::fmin(sum, 2.0 * static_cast<double>(settings.samples) - sum));
  }
  return window;
}

struct RecoveryFigures {
  int replicates = 0;
  int right_count = 0;
  int causal_total = 0;
  int causal_covered = 0;
};

// Replicates of one planted configuration; a causal variant is covered when
// some signal's 95% credible set holds it.
RecoveryFigures run_replicates(TraitKind kind, const std::vector<std::size_t>& causal, double effect, int replicates,
                               std::uint64_t seed) {
  std::mt19937_64 random(seed);
  std::normal_distribution<double> normal(0.0, 1.0);
  std::uniform_real_distribution<double> uniform(0.0, 1.0);
  const LocusSimulation settings;
  RecoveryFigures figures;
  for (int replicate = 0; replicate < replicates; ++replicate) {
    const WindowVariants window = simulate_window(settings, random);
    AnalysisSet set;
    set.trait = "simulated";
    set.kind = kind;
    const Eigen::Index n = static_cast<Eigen::Index>(settings.samples);
    set.y.resize(n);
    set.design.resize(n, 2);
    for (Eigen::Index sample_idx = 0; sample_idx < n; ++sample_idx) {
      const double covariate = normal(random);
      double signal = 0.3 * covariate;
      for (std::size_t variant : causal) signal += effect * window.dosages(sample_idx, static_cast<Eigen::Index>(variant));
      set.y[sample_idx] = kind == TraitKind::binary
                              ? (uniform(random) < 1.0 / (1.0 + std::exp(-(signal - 1.2))) ? 1.0 : 0.0)
                              : signal + normal(random);
      set.design(sample_idx, 0) = 1.0;
      set.design(sample_idx, 1) = covariate;
      set.genotype_index.push_back(static_cast<std::size_t>(sample_idx));
    }
    set.design_names = {"intercept", "covariate"};
    std::vector<std::string> labels;
    for (std::size_t variant = 0; variant < window.size(); ++variant) labels.push_back("v" + std::to_string(variant));
    ConditionalModelInputs inputs;
    inputs.set = &set;
    const ConditionalFitter fit = [&](const std::vector<std::size_t>& conditioned) {
      return fit_conditional(inputs, window, labels, conditioned);
    };
    SelectionSettings selection;
    selection.prior_effect_sd = default_prior_effect_sd(kind == TraitKind::binary, 1.0);
    const LocusSignals found = find_signals(fit, window, std::nullopt, selection);
    ++figures.replicates;
    figures.right_count += found.signals.size() == causal.size();
    for (std::size_t variant : causal) {
      ++figures.causal_total;
      for (const SignalFit& signal : found.signals) {
        if (signal.credible.members[variant].in_95) {
          ++figures.causal_covered;
          break;
        }
      }
    }
  }
  return figures;
}

void expect_recovery(const char* label, const RecoveryFigures& figures) {
  const double right = static_cast<double>(figures.right_count) / figures.replicates;
  const double covered = static_cast<double>(figures.causal_covered) / figures.causal_total;
  std::printf("%s: right number of signals in %d of %d replicates (%.2f); 95%% credible sets hold the causal "
              "variant in %d of %d (%.2f)\n",
              label, figures.right_count, figures.replicates, right, figures.causal_covered, figures.causal_total,
              covered);
  // Targets of issue 17: at least 90% for both.
  EXPECT_GE(right, 0.9) << label;
  EXPECT_GE(covered, 0.9) << label;
}

// Causal variants 8 apart inside one block: latent correlation 0.95^8 = 0.66,
// so neighbouring causal variants are in partial LD (r^2 of about 0.2 to 0.4).
TEST(SignalSelection, RecoversOneTwoAndThreePlantedSignalsInLd) {
  expect_recovery("1 signal", run_replicates(TraitKind::quantitative, {30}, 0.4, 100, 1701));
  expect_recovery("2 signals", run_replicates(TraitKind::quantitative, {26, 34}, 0.4, 100, 1702));
  expect_recovery("3 signals", run_replicates(TraitKind::quantitative, {26, 34, 42}, 0.4, 100, 1703));
}

TEST(SignalSelection, RecoversTwoSignalsOfABinaryTrait) {
  expect_recovery("2 signals, binary", run_replicates(TraitKind::binary, {26, 34}, 0.9, 40, 1704));
}

TEST(SignalSelection, NoSignalWhereNothingIsPlanted) {
  const RecoveryFigures figures = run_replicates(TraitKind::quantitative, {}, 0.0, 20, 1705);
  EXPECT_EQ(figures.right_count, figures.replicates);
}

// Three analysis samples, genotype samples 0, 2 and 3; sample 1 is not analysed.
AnalysisSet three_analysis_samples() {
  AnalysisSet set;
  set.trait = "fev1_litres";
  set.genotype_index = {0, 2, 3};
  set.design = Eigen::MatrixXd::Ones(3, 1);
  set.design_names = {"intercept"};
  return set;
}

TEST(Conditioning, RefusesAVariantConstantInTheAnalysisSamples) {
  AnalysisSet set = three_analysis_samples();
  // Sample 1, outside the analysis set, is the only carrier; sample 3 is missing.
  const ConditionVariant variant{"rs_cond", "1:100:A:G", {0.0, 1.0, 0.0, NAN}};
  try {
    add_condition_columns({variant}, set);
    FAIL() << "a constant conditioning variant was taken";
  } catch (const Error& error) {
    EXPECT_EQ(error.code(), ExitCode::model);
    EXPECT_NE(error.where().find("rs_cond"), std::string::npos) << error.where();
    EXPECT_NE(error.problem().find("does not vary"), std::string::npos) << error.problem();
  }
}

TEST(Conditioning, ImputesMissingDosagesWithTheAnalysisSamplesMean) {
  AnalysisSet set = three_analysis_samples();
  const ConditionVariant variant{"1:100:A:G", "1:100:A:G", {2.0, 5.0, 1.0, NAN}};
  add_condition_columns({variant}, set);
  ASSERT_EQ(set.design.cols(), 2);
  EXPECT_EQ(set.design(0, 1), 2.0);
  EXPECT_EQ(set.design(1, 1), 1.0);
  EXPECT_EQ(set.design(2, 1), 1.5);  // the mean of 2 and 1; sample 1 (5.0) is not analysed
  EXPECT_EQ(set.design_names.back(), "condition 1:100:A:G");
}

// `tamis signals` on a small simulated cohort.
class SignalsEndToEnd : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = new std::string(testing::make_temp_dir("signals_end_to_end"));
    const std::string& dir = *dir_;
    ASSERT_EQ(testing::run_command(testing::tamis_binary() + " simulate --out " + dir +
                                   "/cohort --samples 600 --variants 500 --chromosomes 1 --seed 11 2>/dev/null"),
              0);
    ASSERT_EQ(testing::run_command(testing::tamis_binary() + " scan --genotypes " + dir + "/cohort.vcf.gz --traits " +
                                   dir + "/cohort.traits.tsv --trait fev1_litres --covariates age,sex --out " + dir +
                                   "/scan --quiet --threads 2"),
              0);
    // The strongest variant as a loci file `report` would write it.
    std::string best_line;
    double best = -1.0;
    const std::string results = testing::read_gzip_file(dir + "/scan.fev1_litres.tsv.gz");
    const std::vector<std::string> header = testing::split_fields(testing::lines_of(results)[0]);
    const auto column = [&](const std::string& name) {
      return static_cast<std::size_t>(std::find(header.begin(), header.end(), name) - header.begin());
    };
    for (const auto& row : testing::data_rows(results)) {
      const double strength = std::stod(row[column("neg_log_10_p_value")]);
      if (strength > best) {
        best = strength;
        best_line = "fev1_litres\t" + row[column("chromosome")] + "\t" + row[column("base_pair_location")] + "\t" +
                    row[column("variant_id")] + "\t#NA\t1e-6\t6\t0.1\t" + row[column("base_pair_location")] + "\t" +
                    row[column("base_pair_location")] + "\t1\n";
      }
    }
    testing::write_text_file(dir + "/cohort.loci.tsv", std::string(kLociHeader) + best_line);
  }
  static void TearDownTestSuite() { delete dir_; }

  static std::string signals_command(const std::string& out, int threads, const std::string& extra) {
    const std::string& dir = *dir_;
    return testing::tamis_binary() + " signals --genotypes " + dir + "/cohort.vcf.gz --traits " + dir +
           "/cohort.traits.tsv --covariates age,sex --quiet --select-below 1e-3 --out " + dir + "/" + out +
           " --threads " + std::to_string(threads) + " " + extra;
  }

  static constexpr const char* kLociHeader =
      "trait\tchromosome\tlead_position\tlead_variant_id\tlead_rsid\tp_value\tneg_log_10_p_value\tbeta\t"
      "span_start\tspan_end\tn_variants\n";
  static std::string* dir_;
};
std::string* SignalsEndToEnd::dir_ = nullptr;

TEST_F(SignalsEndToEnd, SameBytesAtOneAndFourThreads) {
  const std::string& dir = *dir_;
  for (const std::string& inputs : {std::string("--trait fev1_litres --loci ") + dir + "/cohort.loci.tsv",
                                    std::string("--trait fev1_litres --trait winter_wheeze --region 1:1-3000000")}) {
    ASSERT_EQ(testing::run_command(signals_command("one", 1, inputs)), 0) << inputs;
    ASSERT_EQ(testing::run_command(signals_command("four", 4, inputs)), 0) << inputs;
    for (const char* file : {".fev1_litres.signals.tsv", ".fev1_litres.credible.tsv"}) {
      const std::string one = testing::read_text_file(dir + "/one" + file);
      EXPECT_EQ(one, testing::read_text_file(dir + "/four" + file)) << file;
      EXPECT_GT(testing::lines_of(one).size(), 1u) << file << " holds no rows";
    }
  }
  const std::string signals = testing::read_text_file(dir + "/one.fev1_litres.signals.tsv");
  EXPECT_EQ(testing::lines_of(signals)[0],
            "signal\tlocus\tchromosome\tbase_pair_location\tvariant_id\teffect_allele\tother_allele\tjoint_beta\t"
            "joint_standard_error\tjoint_wald_p\tjoint_lr_p\tconditional_beta\tconditional_standard_error\t"
            "conditional_p\tcredible_95_size\tcredible_99_size\tselection_order\tselection_p\tjoint_refit\t"
            "window_variants");
  const std::string credible = testing::read_text_file(dir + "/one.fev1_litres.credible.tsv");
  EXPECT_EQ(testing::lines_of(credible)[0],
            "signal\tchromosome\tbase_pair_location\tvariant_id\tpip\tin_95\tin_99\tlog10_bayes_factor\t"
            "conditional_beta\tconditional_standard_error\tconditional_p");
  // Each signal's PIPs over its window sum to 1.
  std::map<std::string, double> pip_sums;
  for (const auto& row : testing::data_rows(credible)) pip_sums[row[0]] += std::stod(row[4]);
  for (const auto& [signal, sum] : pip_sums) EXPECT_NEAR(sum, 1.0, 1e-6) << signal;
}

TEST_F(SignalsEndToEnd, BadInputsGetClearErrors) {
  const std::string& dir = *dir_;
  int code = 0;
  std::string said = testing::capture_command(
      signals_command("bad", 1, "--trait fev1_litres --region 1:1-1000 --loci " + dir + "/cohort.loci.tsv") + " 2>&1",
      &code);
  EXPECT_EQ(code, 2) << said;
  EXPECT_NE(said.find("either --loci or --region"), std::string::npos) << said;

  testing::write_text_file(dir + "/wrong.loci.tsv", std::string(kLociHeader) +
                                                        "fev1_litres\t1\t5000\t1_5000_A_G\t#NA\t1e-9\t9\t0.1\t5000\t5000\t1\n");
  said = testing::capture_command(signals_command("bad", 1, "--trait fev1_litres --loci " + dir + "/wrong.loci.tsv") +
                                      " 2>&1",
                                  &code);
  EXPECT_EQ(code, 4) << said;
  EXPECT_NE(said.find("1_5000_A_G"), std::string::npos) << said;

  testing::write_text_file(dir + "/cut.loci.tsv", "trait\tchromosome\n");
  said = testing::capture_command(signals_command("bad", 1, "--trait fev1_litres --loci " + dir + "/cut.loci.tsv") +
                                      " 2>&1",
                                  &code);
  EXPECT_EQ(code, 7) << said;
  EXPECT_NE(said.find("lead_position"), std::string::npos) << said;

  said = testing::capture_command(
      signals_command("bad", 1, "--trait fev1_litres --region 1:1-100000 --condition-on 1:999:A:C") + " 2>&1", &code);
  EXPECT_EQ(code, 4) << said;
  EXPECT_NE(said.find("1:999:A:C"), std::string::npos) << said;
  EXPECT_FALSE(testing::file_exists(dir + "/bad.fev1_litres.signals.tsv"));
}

TEST_F(SignalsEndToEnd, ScanRefusesAMultiAllelicRecordNamedByItsId) {
  const std::string& dir = *dir_;
  // The ID of the first record with two ALT alleles.
  const std::string id = testing::capture_command("zcat " + dir + "/cohort.vcf.gz | awk '!/^#/ && $5 ~ /,/ && $3 != \".\" {print $3; exit}'");
  ASSERT_FALSE(id.empty());
  int code = 0;
  const std::string said = testing::capture_command(
      testing::tamis_binary() + " scan --genotypes " + dir + "/cohort.vcf.gz --traits " + dir +
          "/cohort.traits.tsv --trait fev1_litres --quiet --out " + dir + "/multi --condition-on " +
          id.substr(0, id.find('\n')) + " 2>&1",
      &code);
  EXPECT_EQ(code, 4) << said;
  EXPECT_NE(said.find("ALT alleles"), std::string::npos) << said;
  EXPECT_NE(said.find("name the allele"), std::string::npos) << said;
}

TEST_F(SignalsEndToEnd, ConditionListEqualsRepeatedConditionOn) {
  const std::string& dir = *dir_;
  // Two biallelic records: one by chr:pos:ref:alt, one by its ID.
  const std::string records = testing::capture_command(
      "zcat " + dir + "/cohort.vcf.gz | awk '!/^#/ && $5 !~ /,/ && $3 != \".\" {print $1\":\"$2\":\"$4\":\"$5, $3}' | sed -n '20p;60p'");
  const std::vector<std::string> lines = testing::lines_of(records);
  ASSERT_EQ(lines.size(), 2u) << records;
  const std::string by_position = testing::split_fields(lines[0], ' ')[0];
  const std::string by_id = testing::split_fields(lines[1], ' ')[1];
  testing::write_text_file(dir + "/conditions.txt", "# conditioning variants\n" + by_position + "\n\n" + by_id + "\n");
  const std::string scan = testing::tamis_binary() + " scan --genotypes " + dir + "/cohort.vcf.gz --traits " + dir +
                           "/cohort.traits.tsv --trait fev1_litres --covariates age,sex --quiet --threads 2 --out " + dir;
  ASSERT_EQ(testing::run_command(scan + "/listed --conditioning-variants " + dir + "/conditions.txt"), 0);
  ASSERT_EQ(testing::run_command(scan + "/repeated --condition-on " + by_position + " --condition-on " + by_id), 0);
  EXPECT_EQ(testing::read_gzip_file(dir + "/listed.fev1_litres.tsv.gz"),
            testing::read_gzip_file(dir + "/repeated.fev1_litres.tsv.gz"));
  const std::string sidecar = testing::read_text_file(dir + "/listed.fev1_litres.tsv.gz-meta.yaml");
  EXPECT_NE(sidecar.find("tamis_conditioned_on: " + by_position + ", " + by_id), std::string::npos) << sidecar;
  const std::string log = testing::read_text_file(dir + "/listed.log");
  EXPECT_NE(log.find("conditioning on " + by_position), std::string::npos) << log;
  EXPECT_NE(log.find("(" + by_id + ")"), std::string::npos) << log;
}

// chr_pos_ref_alt as chr:pos:ref:alt.
std::string colon_form(std::string variant_id) {
  std::replace(variant_id.begin(), variant_id.end(), '_', ':');
  return variant_id;
}

// With --relatedness, a signal's joint refit is the mixed model's refit of
// it conditioned on the other signals: the same numbers as `confirm
// --condition-on` of the others.
TEST(SignalsWithRelatedness, JointFitEqualsConfirmConditionedOnTheOtherSignals) {
  const std::string dir = testing::make_temp_dir("signals_relatedness");
  const std::string tamis = testing::tamis_binary();
  ASSERT_EQ(testing::run_command(tamis + " simulate --out " + dir + "/fam --samples 600 --variants 300 --chromosomes 1 "
                                 "--families 0.5 --seed 4 2>/dev/null"),
            0);
  ASSERT_EQ(testing::run_command(tamis + " relatedness --genotypes " + dir + "/fam.vcf.gz --out " + dir + "/fam --quiet"), 0);
  const std::string inputs = " --genotypes " + dir + "/fam.vcf.gz --traits " + dir +
                             "/fam.traits.tsv --trait fev1_litres --covariates age,sex --relatedness " + dir +
                             "/fam.relatedness.tsv.gz --quiet";
  ASSERT_EQ(testing::run_command(tamis + " signals" + inputs + " --region 1 --select-below 1e-2 --max-signals 3 --out " +
                                 dir + "/signals"),
            0);
  const auto signals = testing::data_rows(testing::read_text_file(dir + "/signals.fev1_litres.signals.tsv"));
  ASSERT_GE(signals.size(), 2u) << "the check needs two signals";
  const std::vector<std::string>& first = signals[0];
  std::string others;
  for (std::size_t signal_idx = 1; signal_idx < signals.size(); ++signal_idx) {
    others += " --condition-on " + colon_form(signals[signal_idx][0]);
  }
  testing::write_text_file(dir + "/first.txt", colon_form(first[0]) + "\n");
  ASSERT_EQ(testing::run_command(tamis + " confirm" + inputs + others + " --variants " + dir + "/first.txt --out " + dir +
                                 "/confirmed"),
            0);
  const std::string results = testing::read_gzip_file(dir + "/confirmed.fev1_litres.tsv.gz");
  const std::vector<std::string> header = testing::split_fields(testing::lines_of(results)[0]);
  const auto rows = testing::data_rows(results);
  ASSERT_EQ(rows.size(), 1u);
  const auto field = [&](const std::string& name) {
    return rows[0][static_cast<std::size_t>(std::find(header.begin(), header.end(), name) - header.begin())];
  };
  EXPECT_EQ(first[7], field("beta"));
  EXPECT_EQ(first[8], field("standard_error"));
  EXPECT_EQ(first[9], field("wald_p"));
  EXPECT_EQ(first[10], field("lrt_p"));
}

}  // namespace
}  // namespace tamis
