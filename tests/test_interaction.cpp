// Interaction refits (tamis/interaction.hpp) against R, the chi-square(k)
// and F tails against R, and the calibration of the model-based and robust
// interaction tests when the trait's variance depends on the exposure.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <random>
#include <string>

#include "support/calibration.hpp"
#include "support/r_reference.hpp"
#include "support/test_support.hpp"
#include "tamis/distributions.hpp"
#include "tamis/interaction.hpp"
#include "tamis/interaction_score.hpp"

namespace tamis::testing {
namespace {

// Values on a grid of 2^-10, printed exactly, so that R reads the very
// doubles the fits here use.
double on_grid(double value) { return std::round(value * 1024.0) / 1024.0; }

// A small invented Saltmarsh Ridge sample: age, three field stations (A
// most frequent), a numeric exposure E (hours outdoors, centred), dosages g;
// a quantitative trait whose noise grows with |E| and a binary one, both
// with a g x E effect.
struct InteractionData {
  Eigen::VectorXd y, yb, age, site_b, site_c, e, g;
};

InteractionData simulate_interaction_data(int n, std::uint64_t seed) {
  std::mt19937_64 random(seed);
  std::normal_distribution<double> normal(0.0, 1.0);
  std::uniform_real_distribution<double> uniform(0.0, 1.0);
  InteractionData d;
  for (Eigen::VectorXd* column : {&d.y, &d.yb, &d.age, &d.site_b, &d.site_c, &d.e, &d.g}) column->resize(n);
  for (int s = 0; s < n; ++s) {
    const double station = uniform(random);
    d.age[s] = on_grid(20.0 + 50.0 * uniform(random));
    d.site_b[s] = station > 0.5 && station <= 0.8 ? 1.0 : 0.0;
    d.site_c[s] = station > 0.8 ? 1.0 : 0.0;
    d.e[s] = on_grid(normal(random));
    const double copies = (uniform(random) < 0.3 ? 1.0 : 0.0) + (uniform(random) < 0.3 ? 1.0 : 0.0);
    d.g[s] = on_grid(std::clamp(copies + 0.1 * normal(random), 0.0, 2.0));
    const double noise = (1.0 + 0.6 * std::fabs(d.e[s]) + 0.8 * d.site_c[s]) * normal(random);
    d.y[s] = on_grid(1.0 + 0.02 * d.age[s] + 0.3 * d.site_b[s] + 0.2 * d.e[s] + 0.25 * d.g[s] +
                     0.15 * d.g[s] * d.e[s] + 0.3 * d.g[s] * d.site_c[s] + noise);
    const double eta = -0.8 + 0.02 * (d.age[s] - 45.0) + 0.4 * d.g[s] + 0.3 * d.e[s] + 0.35 * d.g[s] * d.e[s] +
                       0.5 * d.site_b[s] - 0.4 * d.g[s] * d.site_c[s];
    d.yb[s] = uniform(random) < 1.0 / (1.0 + std::exp(-eta)) ? 1.0 : 0.0;
  }
  return d;
}

void write_interaction_data(const InteractionData& d, const std::string& path) {
  std::string text = "y\tyb\tage\tsiteB\tsiteC\tE\tg\n";
  char line[512];
  for (Eigen::Index s = 0; s < d.y.size(); ++s) {
    std::snprintf(line, sizeof line, "%.10f\t%.0f\t%.10f\t%.0f\t%.0f\t%.10f\t%.10f\n", d.y[s], d.yb[s], d.age[s],
                  d.site_b[s], d.site_c[s], d.e[s], d.g[s]);
    text += line;
  }
  write_text_file(path, text);
}

// The null design [1, age, E, siteB, siteC] and the exposure's columns.
struct InteractionCase {
  std::string name;
  bool binary = false;
  bool categorical = false;
};

NullModel null_model_of(const InteractionData& d, bool binary) {
  const Eigen::Index n = d.y.size();
  Eigen::MatrixXd design(n, 5);
  design << Eigen::VectorXd::Ones(n), d.age, d.e, d.site_b, d.site_c;
  return fit_null_model(binary ? "yb" : "y", binary ? TraitKind::binary : TraitKind::quantitative,
                        binary ? d.yb : d.y, design, {"intercept", "age", "E", "siteB", "siteC"});
}

Eigen::MatrixXd exposure_of(const InteractionData& d, bool categorical) {
  if (!categorical) return d.e;
  Eigen::MatrixXd exposure(d.e.size(), 2);
  exposure << d.site_b, d.site_c;
  return exposure;
}

double p_of(const InteractionTest& test) { return std::exp(test.log_p); }

void expect_test(const InteractionTest& test, const std::map<std::string, std::string>& reference,
                 const std::string& key, double tolerance) {
  expect_reference(test.statistic, reference, key + "_stat", tolerance);
  expect_reference(p_of(test), reference, key + "_p", tolerance);
}

std::vector<std::size_t> identity_rows(Eigen::Index n) {
  std::vector<std::size_t> rows(static_cast<std::size_t>(n));
  for (std::size_t row = 0; row < rows.size(); ++row) rows[row] = row;
  return rows;
}

TEST(InteractionFit, AgreesWithRLmGlmSandwichAndLmtest) {
  if (!have_rscript() || run_command("Rscript -e 'library(sandwich); library(lmtest)' > /dev/null 2>&1") != 0) {
    GTEST_SKIP() << "Rscript with sandwich and lmtest (Debian r-cran-sandwich, r-cran-lmtest) not found";
  }
  const InteractionData data = simulate_interaction_data(400, 18001);
  const std::string dir = make_temp_dir("interaction_reference");
  write_interaction_data(data, dir + "/data.tsv");
  // R 4.2.2 stats lm/glm; sandwich 3.0-2 vcovHC; lmtest 0.9-40 coeftest,
  // waldtest, lrtest; anova(..., test = "LRT") for glm (versions printed by
  // the script). Tolerances: 1e-8 linear, 1e-6 logistic (relative).
  const auto reference = run_reference("interaction_reference.R", dir + "/data.tsv");
  const InteractionCase cases[] = {
      {"lin_num", false, false}, {"lin_cat", false, true}, {"logit_num", true, false}, {"logit_cat", true, true}};
  for (const InteractionCase& c : cases) {
    const double tolerance = c.binary ? 1e-6 : 1e-8;
    const NullModel model = null_model_of(data, c.binary);
    const Eigen::MatrixXd exposure = exposure_of(data, c.categorical);
    const struct {
      const char* name;
      RobustErrors robust;
    } variances[] = {{"hc0", RobustErrors::hc0}, {"hc3", RobustErrors::hc3}};
    for (const auto& variance : variances) {
      const InteractionFit fit = fit_interaction(model, exposure, data.g, variance.robust);
      ASSERT_TRUE(fit.converged && fit.estimable) << c.name;
      for (const auto& [kind, robust] : {std::pair<std::string, bool>{"model", false}, {variance.name, true}}) {
        const std::string key = c.name + "." + kind + ".";
        expect_reference(fit.main_beta, reference, key + "main_beta", tolerance);
        expect_reference(robust ? fit.main_se : fit.main_model_se, reference, key + "main_se", tolerance);
        for (Eigen::Index k = 0; k < exposure.cols(); ++k) {
          const std::string index = std::to_string(k + 1);
          expect_reference(fit.interaction_beta[k], reference, key + "interaction_beta" + index, tolerance);
          expect_reference(robust ? fit.interaction_se[k] : fit.interaction_model_se[k], reference,
                           key + "interaction_se" + index, tolerance);
        }
        const InteractionTest& interaction = robust ? fit.interaction_robust : fit.interaction_model;
        expect_test(interaction, reference, key + "interaction", tolerance);
        expect_test(robust ? fit.joint_robust : fit.joint_model, reference, key + "joint", tolerance);
        if (!c.categorical) expect_reference(p_of(interaction), reference, key + "interaction_coeftest_p", tolerance);
      }
      expect_test(fit.interaction_lr, reference, c.name + ".lr.interaction", tolerance);
      expect_test(fit.joint_lr, reference, c.name + ".lr.joint", tolerance);
      EXPECT_EQ(fit.interaction_robust.df, exposure.cols());
      EXPECT_EQ(fit.joint_robust.df, exposure.cols() + 1);
    }
  }
  // The score tests, against their formulas evaluated with R's lm and glm
  // fits of [X g] and of X (interaction_reference.R). Linear: exact, to
  // 1e-8. Logistic: the scan fits the main effect by Newton steps along the
  // adjusted genotype from the null fit rather than refitting every
  // coefficient, so its statistics approach glm's maximum-likelihood ones
  // only to about 1e-2 (relative; measured, see the printed deviation).
  report_largest_deviation("R 4.2.2 lm/glm with sandwich and lmtest (refits)");
  for (const InteractionCase& c : cases) {
    if (c.name == "logit_num") report_largest_deviation("the score formulas with R 4.2.2 lm fits");
    const NullModel model = null_model_of(data, c.binary);
    const Eigen::MatrixXd exposure = exposure_of(data, c.categorical);
    const std::vector<std::size_t> rows = identity_rows(data.g.size());
    for (const auto& [kind, robust] : {std::pair<std::string, RobustErrors>{"model", RobustErrors::off},
                                       {"hc0", RobustErrors::hc0}, {"hc3", RobustErrors::hc3}}) {
      const InteractionScoreKernel kernel(model, exposure, rows, robust);
      InteractionScore score;
      kernel.compute(data.g.data(), 1, &score);
      ASSERT_TRUE(score.testable);
      const std::string key = c.name + ".score." + kind + ".";
      const double tolerance = c.binary ? 2e-2 : 1e-8;
      expect_reference(score.chisq, reference, key + "interaction_stat", tolerance);
      expect_reference(std::exp(score.log_p), reference, key + "interaction_p", tolerance);
      expect_reference(std::exp(score.joint_log_p), reference, key + "joint_p", c.binary ? 1e-6 : 1e-8);
      expect_reference(std::exp(score.joint_model_log_p), reference, c.name + ".score.model.joint_p",
                       c.binary ? 1e-6 : 1e-8);
      expect_reference(score.main_beta, reference, key + "main_beta", tolerance);
      expect_reference(score.main_se, reference, key + "main_se", tolerance);
      if (robust == RobustErrors::off) {
        EXPECT_EQ(score.model_chisq, score.chisq);
      }
    }
  }
  report_largest_deviation("the score formulas with R 4.2.2 glm fits (logistic, approximate)");
  // The tails: R 4.2.2 stats::pchisq and stats::pf with log.p = TRUE.
  for (const auto& [x, df] : {std::pair<double, int>{0.3, 2}, {4.5, 3}, {11, 4}, {60, 5}, {900, 2}, {3000, 3}}) {
    char key[64];
    std::snprintf(key, sizeof key, "chisq.%g.%d", x, df);
    expect_reference(log_chisq_upper_tail(x, df), reference, key, 1e-12);
  }
  const struct {
    double f, df1, df2;
  } f_points[] = {{0.2, 2, 50}, {3.1, 3, 394}, {12, 2, 1000}, {400, 4, 30}, {5000, 2, 394}};
  for (const auto& point : f_points) {
    char key[64];
    std::snprintf(key, sizeof key, "f.%g.%g.%g", point.f, point.df1, point.df2);
    expect_reference(log_f_upper_tail(point.f, point.df1, point.df2), reference, key, 1e-10);
  }
  report_largest_deviation("R 4.2.2 pchisq and pf");
}

TEST(InteractionFit, RobustOffRepeatsTheModelBasedTests) {
  const InteractionData data = simulate_interaction_data(200, 18002);
  const NullModel model = null_model_of(data, false);
  const InteractionFit fit = fit_interaction(model, data.e, data.g, RobustErrors::off);
  EXPECT_EQ(fit.interaction_robust.log_p, fit.interaction_model.log_p);
  EXPECT_EQ(fit.joint_robust.statistic, fit.joint_model.statistic);
  EXPECT_EQ(fit.main_se, fit.main_model_se);
}

TEST(InteractionFit, AVariantInTheCovariateSpanIsNotEstimable) {
  const InteractionData data = simulate_interaction_data(200, 18003);
  for (const bool binary : {false, true}) {
    const NullModel model = null_model_of(data, binary);
    const InteractionFit fit = fit_interaction(model, data.e, data.age, RobustErrors::hc0);
    EXPECT_FALSE(fit.estimable);
    EXPECT_FALSE(fit.converged);
    EXPECT_EQ(fit.interaction_robust.log_p, 0.0);
    EXPECT_EQ(fit.joint_lr.df, 2);
  }
}

// A null interaction (no g x E effect at all) on a trait whose noise SD is 3
// among the exposed fifth of the samples and 1 among the others: the pooled,
// model-based variance of the interaction understates its true variance by
// about a factor 3, so the model-based test rejects far too often, while
// the sandwich variance keeps the rate at the level; the same for the
// refit's Wald tests and the scan's score tests. Counts of p < 0.01 over
// 2000 replicates against the exact binomial 99.9% interval
// (support/calibration.hpp, equal to R 4.2.2 qbinom).
TEST(InteractionCalibration, RobustTestHoldsTheLevelWhereTheModelBasedOneIsInflated) {
  constexpr int kSamples = 2000, kReplicates = 2000;
  constexpr double kLevel = 0.01;
  std::mt19937_64 random(18004);
  std::normal_distribution<double> normal(0.0, 1.0);
  std::uniform_real_distribution<double> uniform(0.0, 1.0);
  Eigen::VectorXd exposed(kSamples), age(kSamples);
  for (int s = 0; s < kSamples; ++s) {
    exposed[s] = s % 5 == 0 ? 1.0 : 0.0;
    age[s] = 20.0 + 50.0 * uniform(random);
  }
  Eigen::MatrixXd design(kSamples, 3);
  design << Eigen::VectorXd::Ones(kSamples), age, exposed;
  int rejected[3] = {0, 0, 0};  // model-based, HC0, HC3
  int score_rejected[2] = {0, 0};  // the scan's score test: model-based, HC0
  const std::vector<std::size_t> rows = identity_rows(kSamples);
  Eigen::VectorXd y(kSamples), g(kSamples);
  for (int replicate = 0; replicate < kReplicates; ++replicate) {
    for (int s = 0; s < kSamples; ++s) {
      g[s] = (uniform(random) < 0.3 ? 1.0 : 0.0) + (uniform(random) < 0.3 ? 1.0 : 0.0);
      y[s] = 0.01 * age[s] + 0.5 * exposed[s] + 0.2 * g[s] + (exposed[s] > 0.0 ? 3.0 : 1.0) * normal(random);
    }
    const NullModel model = fit_null_model("fev1", TraitKind::quantitative, y, design, {"intercept", "age", "E"});
    const InteractionFit hc0 = fit_interaction(model, exposed, g, RobustErrors::hc0);
    const InteractionFit hc3 = fit_interaction(model, exposed, g, RobustErrors::hc3);
    rejected[0] += p_of(hc0.interaction_model) < kLevel;
    rejected[1] += p_of(hc0.interaction_robust) < kLevel;
    rejected[2] += p_of(hc3.interaction_robust) < kLevel;
    InteractionScore score;
    InteractionScoreKernel(model, exposed, rows, RobustErrors::hc0).compute(g.data(), 1, &score);
    score_rejected[0] += std::exp(score.model_log_p) < kLevel;
    score_rejected[1] += std::exp(score.log_p) < kLevel;
  }
  std::printf("score tests: model-based %d, HC0 %d\n", score_rejected[0], score_rejected[1]);
  const auto [lo, hi] = binomial_bounds(kReplicates, kLevel);
  std::printf("p < %.2f in %d null replicates: model-based %d, HC0 %d, HC3 %d (99.9%% bounds %zu-%zu)\n", kLevel,
              kReplicates, rejected[0], rejected[1], rejected[2], lo, hi);
  EXPECT_GT(static_cast<std::size_t>(rejected[0]), hi) << "the model-based test should be inflated here";
  EXPECT_GE(static_cast<std::size_t>(rejected[1]), lo);
  EXPECT_LE(static_cast<std::size_t>(rejected[1]), hi);
  EXPECT_GE(static_cast<std::size_t>(rejected[2]), lo);
  EXPECT_LE(static_cast<std::size_t>(rejected[2]), hi);
  EXPECT_GT(static_cast<std::size_t>(score_rejected[0]), hi);
  EXPECT_GE(static_cast<std::size_t>(score_rejected[1]), lo);
  EXPECT_LE(static_cast<std::size_t>(score_rejected[1]), hi);
}

// A variant's scores have the same bits alone or at any place in a block of
// any width (lanes never mix), for linear and logistic traits.
TEST(InteractionScoreKernel, ResultsDoNotDependOnTheBlock) {
  const InteractionData data = simulate_interaction_data(300, 18005);
  const Eigen::Index n = data.g.size();
  constexpr std::size_t kWidth = 13;
  std::mt19937_64 random(18006);
  std::uniform_int_distribution<int> copies(0, 2);
  std::vector<double> block(static_cast<std::size_t>(n) * kWidth);
  for (double& value : block) value = copies(random);
  for (Eigen::Index s = 0; s < n; ++s) block[static_cast<std::size_t>(s) * kWidth + 9] = data.g[s];
  for (const bool binary : {false, true}) {
    const NullModel model = null_model_of(data, binary);
    const InteractionScoreKernel kernel(model, exposure_of(data, true), identity_rows(n), RobustErrors::hc3);
    InteractionScore alone, in_block[kWidth];
    kernel.compute(data.g.data(), 1, &alone);
    kernel.compute(block.data(), kWidth, in_block);
    EXPECT_EQ(alone.chisq, in_block[9].chisq);
    EXPECT_EQ(alone.joint_log_p, in_block[9].joint_log_p);
    EXPECT_EQ(alone.se, in_block[9].se);
    EXPECT_EQ(alone.main_se, in_block[9].main_se);
  }
}

}  // namespace
}  // namespace tamis::testing
