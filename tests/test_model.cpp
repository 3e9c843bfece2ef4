// Tests of the statistics stage: tail probabilities, null models, the blocked
// score kernel and the confirmation refits. Reference values come from R 4.2.2
// (tests/reference/model_reference.R prints every constant used below) and
// from published chi-square tables.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <functional>
#include <iostream>
#include <map>
#include <string>
#include <vector>

#include "tamis/confirm.hpp"
#include "tamis/distributions.hpp"
#include "tamis/errors.hpp"
#include "tamis/null_model.hpp"
#include "tamis/score_kernel.hpp"

namespace tamis {
namespace {

double relative_error(double got, double want) {
  if (want == 0.0) return std::fabs(got);
  return std::fabs(got - want) / std::fabs(want);
}

// Largest relative error seen per comparison group, printed at the end so the
// achieved accuracy is visible in the test log.
std::map<std::string, double>& worst_errors() {
  static std::map<std::string, double> errors;
  return errors;
}

void expect_relative(const std::string& group, double got, double want, double tolerance,
                     const std::string& what) {
  const double error = relative_error(got, want);
  double& worst = worst_errors()[group];
  worst = std::max(worst, error);
  EXPECT_LE(error, tolerance) << group << " " << what << ": got " << got << ", want " << want;
}

class ReportWorstErrors : public ::testing::Environment {
 public:
  void TearDown() override {
    for (const auto& [group, error] : worst_errors()) {
      std::cout << "[ accuracy ] max relative error, " << group << ": " << error << "\n";
    }
  }
};
const auto* const report_environment =
    ::testing::AddGlobalTestEnvironment(new ReportWorstErrors);

// A small deterministic generator (splitmix64) for the simulations.
class Random {
 public:
  explicit Random(std::uint64_t seed) : state_(seed) {}
  std::uint64_t next() {
    std::uint64_t z = (state_ += 0x9E3779B97F4A7C15ULL);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
    return z ^ (z >> 31);
  }
  double uniform() { return (static_cast<double>(next() >> 11) + 0.5) * (1.0 / 9007199254740992.0); }
  double normal() {
    const double u1 = uniform();
    const double u2 = uniform();
    return std::sqrt(-2.0 * std::log(u1)) * std::cos(6.283185307179586 * u2);
  }
  int binomial2(double freq) { return (uniform() < freq) + (uniform() < freq); }

 private:
  std::uint64_t state_;
};

// ---------------------------------------------------------------------------
// Distributions
// ---------------------------------------------------------------------------

TEST(Distributions, ChiSquareQuantilesMatchPublishedTables) {
  // Published chi-square(1) critical values (standard statistical tables):
  // 3.841459 at p = 0.05 and 29.71679 at p = 5e-8 (the genome-wide threshold).
  EXPECT_NEAR(chisq1_upper_quantile(0.05), 3.841459, 5e-7);
  EXPECT_NEAR(chisq1_upper_quantile(5e-8), 29.71679, 5e-6);
  // And the other way: the tail at the tabulated value (7 significant digits,
  // so the tail is known to a few parts in 1e6).
  EXPECT_NEAR(std::exp(log_chisq1_upper_tail(3.841459)) / 0.05, 1.0, 2e-6);
  EXPECT_NEAR(std::exp(log_chisq1_upper_tail(29.71679)) / 5e-8, 1.0, 5e-6);
  // Round trip far in the tail.
  for (double log_p : {-1.0, -50.0, -300.0, -700.0}) {
    const double q = chisq1_upper_quantile(std::exp(log_p));
    EXPECT_NEAR(log_chisq1_upper_tail(q) / log_p, 1.0, 1e-12) << log_p;
  }
}

TEST(Distributions, ChiSquareLogTailMatchesR) {
  // R 4.2.2 stats::pchisq(x, 1, lower.tail=FALSE, log.p=TRUE)
  const double x[] = {5.0e-01, 1.0e+01, 1.0e+02, 7.0e+02, 1.5e+03, 3.0e+03, 5.0e+03, 2.0e+04};
  const double want[] = {-7.3501112983708439e-01, -6.4596124541501201e+00, -5.2538137969952530e+01,
                         -3.5350275502514864e+02, -7.5388306710538234e+02, -1.5042293081924809e+03,
                         -2.5044845878484507e+03, -1.0005177585122665e+04};
  for (int k = 0; k < 8; ++k) {
    expect_relative("chi2_1 log tail vs R pchisq", log_chisq1_upper_tail(x[k]), want[k], 1e-10,
                    "x=" + std::to_string(x[k]));
  }
}

TEST(Distributions, ChiSquareLogTailIsFiniteSmoothAndMonotone) {
  EXPECT_EQ(log_chisq1_upper_tail(0.0), 0.0);
  EXPECT_EQ(log_chisq1_upper_tail(-3.0), 0.0);
  double previous = 0.0;
  for (double stat = 1e-6; stat <= 1e5; stat *= 1.01) {
    const double value = log_chisq1_upper_tail(stat);
    ASSERT_TRUE(std::isfinite(value)) << stat;
    ASSERT_LT(value, previous) << stat;
    previous = value;
  }
  // Continuity where the asymptotic expansion takes over (x = 20, stat = 800):
  // the two methods agree to rounding on either side.
  const double below = log_chisq1_upper_tail(std::nextafter(800.0, 0.0));
  const double above = log_chisq1_upper_tail(800.0);
  EXPECT_LE(relative_error(below, above), 1e-14);
  // p near 1e-21700 at stat 1e5: ln p = -s/2 - ln(sqrt(pi s/2)) + ln(1 - 1/s + ...).
  const double s = 1e5;
  const double leading = -s / 2.0 - 0.5 * std::log(3.14159265358979323846 * s / 2.0) +
                         std::log1p(-1.0 / s + 3.0 / (s * s));
  EXPECT_LE(relative_error(log_chisq1_upper_tail(s), leading), 1e-14);
  EXPECT_NEAR(neg_log10_from_log(log_chisq1_upper_tail(s)), 21717.32, 0.01);  // p ~ 4.8e-21718
  EXPECT_EQ(neg_log10_from_log(0.0), 0.0);
  EXPECT_FALSE(std::signbit(neg_log10_from_log(0.0)));
  EXPECT_DOUBLE_EQ(neg_log10_from_log(std::log(1e-8)), 8.0);
}

TEST(Distributions, StudentTwoSidedLogTailMatchesR) {
  // R 4.2.2: log(2) + stats::pt(-abs(t), df, log.p=TRUE)
  const double t[] = {0.1, 1.3, 2.5, 4.0, 10.0, 60.0, 3.0, 8.0, 0.7};
  const double df[] = {5, 12, 37, 1, 30, 50, 1000, 250000, 3};
  const double want[] = {-7.8794167839662088e-02, -1.5231814528568228e+00, -4.0757213256274607e+00,
                         -1.8581668667974620e+00, -2.3807774373098361e+01, -1.0944165881363102e+02,
                         -5.8900967357704754e+00, -3.4316067583234684e+01, -6.2674727105964056e-01};
  for (int k = 0; k < 9; ++k) {
    expect_relative("Student t log two-sided vs R pt", log_student_t_two_sided(t[k], df[k]), want[k],
                    1e-10, "t=" + std::to_string(t[k]) + " df=" + std::to_string(df[k]));
    EXPECT_EQ(log_student_t_two_sided(-t[k], df[k]), log_student_t_two_sided(t[k], df[k]));
  }
  EXPECT_EQ(log_student_t_two_sided(0.0, 10.0), 0.0);
  EXPECT_TRUE(std::isfinite(log_student_t_two_sided(1e200, 10.0)));
}

TEST(Distributions, IncompleteBetaClosedForms) {
  // Formula: I_x(a, 1) = x^a and I_x(1, b) = 1 - (1 - x)^b (its log evaluated
  // without cancellation on either side).
  auto log_one_minus_power = [](double x, double b) {
    const double log_power = b * std::log1p(-x);
    const double value = -std::expm1(log_power);
    return value < 0.5 ? std::log(value) : std::log1p(-std::exp(log_power));
  };
  for (double x : {1e-8, 0.01, 0.3, 0.5, 0.9, 0.999}) {
    for (double a : {0.5, 1.0, 2.5, 40.0}) {
      expect_relative("incomplete beta closed forms", log_regularized_incomplete_beta(x, a, 1.0),
                      a * std::log(x), 1e-12, "I_x(a,1)");
      expect_relative("incomplete beta closed forms", log_regularized_incomplete_beta(x, 1.0, a),
                      log_one_minus_power(x, a), 1e-12, "I_x(1,b)");
    }
  }
}

// ---------------------------------------------------------------------------
// A fixed dataset, identical to the one built in tests/reference/model_reference.R
// ---------------------------------------------------------------------------

struct Fixture {
  Eigen::MatrixXd design;  // intercept, age, level B, level C (level A, the most frequent, is the reference)
  std::vector<std::string> names{"intercept", "age", "level_B", "level_C"};
  Eigen::VectorXd g1, g2;  // a dosage column and a rare variant
  Eigen::VectorXd y;       // quantitative
  Eigen::VectorXd yb;      // binary
};

Fixture make_fixture() {
  const int n = 40;
  Fixture f;
  f.design.resize(n, 4);
  f.g1.resize(n);
  f.g2.resize(n);
  f.y.resize(n);
  f.yb.resize(n);
  for (int s = 0; s < n; ++s) {
    const int age = 20 + (s * 37) % 41;
    const int level = (s * 7 + s / 5) % 3;
    const int b = level == 1, c = level == 2;
    const int k1 = (s * 13 + 5) % 9;
    const int noise = (s * s * 17 + s * 29 + 11) % 101 - 50;
    f.design(s, 0) = 1.0;
    f.design(s, 1) = age;
    f.design(s, 2) = b;
    f.design(s, 3) = c;
    f.g1[s] = k1 / 4.0;
    f.g2[s] = s % 11 == 3 ? 1.0 : (s == 17 ? 2.0 : 0.0);
    f.y[s] = (600 + 12 * age + 160 * b - 120 * c + 35 * k1 + 16 * noise) / 400.0;
    f.yb[s] = (((s * s * 7 + s * 3 + 1) % 13 + k1 + 2 * b) > 9) ? 1.0 : 0.0;
  }
  return f;
}

// Score results of one variant through the kernel.
ScoreResult score_one(const NullModel& model, const Eigen::VectorXd& g) {
  ScoreKernel kernel(model);
  ScoreScratch scratch;
  std::vector<double> block(g.data(), g.data() + g.size());
  ScoreResult result;
  kernel.compute(block.data(), 1, scratch, &result);
  return result;
}

// Order of the reference vectors below: beta, se, Wald statistic (t for lm,
// chi-square for glm), Wald log p, LR statistic, LR log p, U, V, score T, score log p.
struct Reference {
  double beta, se, wald, wald_log_p, lr, lr_log_p, u, v, score, score_log_p;
};

void check_against_reference(const std::string& group, const NullModel& model, const Eigen::VectorXd& g,
                             const Reference& want, bool linear, double tolerance) {
  const ConfirmResult confirmed = confirm_variant(model, g);
  EXPECT_TRUE(confirmed.converged);
  expect_relative(group + " beta", confirmed.beta, want.beta, tolerance, "beta");
  expect_relative(group + " se", confirmed.se, want.se, tolerance, "se");
  const double wald = linear ? confirmed.beta / confirmed.se : confirmed.wald_chisq;
  expect_relative(group + " Wald", wald, want.wald, tolerance, "Wald");
  if (linear) {
    expect_relative(group + " Wald", confirmed.wald_chisq, want.wald * want.wald, tolerance, "t^2");
  }
  expect_relative(group + " Wald log p", confirmed.wald_log_p, want.wald_log_p, tolerance, "Wald ln p");
  expect_relative(group + " LR", confirmed.lrt_chisq, want.lr, tolerance, "LR");
  expect_relative(group + " LR log p", confirmed.lrt_log_p, want.lr_log_p, tolerance, "LR ln p");

  const ScoreResult score = score_one(model, g);
  EXPECT_TRUE(score.testable);
  expect_relative(group + " score", score.u, want.u, tolerance, "U");
  expect_relative(group + " score", score.v, want.v, tolerance, "V");
  expect_relative(group + " score", score.chisq, want.score, tolerance, "T");
  expect_relative(group + " score log p", score.log_p, want.score_log_p, tolerance, "score ln p");
  // Formula: the one-step estimate and its SE reproduce the score statistic.
  EXPECT_LE(relative_error((score.beta / score.se) * (score.beta / score.se), score.chisq), 1e-13);
}

TEST(NullModel, LinearMatchesR) {
  const Fixture f = make_fixture();
  const NullModel model = fit_null_model("height", TraitKind::quantitative, f.y, f.design, f.names);
  EXPECT_TRUE(model.dropped_columns.empty());
  ASSERT_EQ(model.column_count(), 4);
  // R 4.2.2 stats::lm(y ~ age + B + C): coef(), logLik(), sum(resid^2)
  const double coef[] = {4.4226767310386117e-01, 6.0545202121272776e-02, 8.7706123674204572e-01,
                         3.4583249949980899e-04};
  for (int k = 0; k < 4; ++k) {
    expect_relative("lm null coefficients", model.coefficients[k], coef[k], 1e-6, model.column_names[k]);
  }
  expect_relative("lm null log-likelihood", model.log_likelihood, -5.8507672437132861e+01, 1e-6, "logLik");
  expect_relative("lm null log-likelihood", model.rss, 4.3657976774345862e+01, 1e-6, "RSS");
  EXPECT_DOUBLE_EQ(model.sigma2, model.rss / 36.0);
  // The basis is orthonormal and spans the design.
  const Eigen::MatrixXd qtq = model.basis.transpose() * model.basis;
  EXPECT_LE((qtq - Eigen::MatrixXd::Identity(4, 4)).cwiseAbs().maxCoeff(), 1e-13);
  EXPECT_LE((model.design.transpose() * model.residuals).cwiseAbs().maxCoeff(), 1e-10);
}

TEST(Confirm, LinearMatchesR) {
  const Fixture f = make_fixture();
  const NullModel model = fit_null_model("height", TraitKind::quantitative, f.y, f.design, f.names);
  // R 4.2.2: summary(lm(y ~ age + B + C + g))$coefficients["g", ], log(2) + pt(-|t|, 35, log.p=TRUE),
  // 2 * (logLik(m1) - logLik(m0)), pchisq(lr, 1, lower.tail=FALSE, log.p=TRUE);
  // score written out from the formula: U = g'r, V = sigma2 (g'g - g'X (X'X)^-1 X'g),
  // sigma2 = RSS0 / (n - p), T = U^2 / V, pchisq(T, 1, lower.tail=FALSE, log.p=TRUE).
  const Reference g1{2.8443445648855098e-01, 2.6922522345989897e-01, 1.0564926006307780e+00,
                     -1.2107245040669872e+00, 1.2557123665567644e+00, -1.3376404188060409e+00,
                     4.7436490488042775e+00, 2.0225135964640572e+01, 1.1125861570256999e+00,
                     -1.2326450678676233e+00};
  const Reference g2{-5.6077529214165631e-02, 4.2202754519593338e-01, -1.3287646707546233e-01,
                     -1.1087334441739505e-01, 2.0173375512555936e-02, -1.1984949474954441e-01,
                     -3.9253989893936236e-01, 8.4889903669737983e+00, 1.8151460373756412e-02,
                     -1.1336194896419831e-01};
  check_against_reference("lm g1/g2", model, f.g1, g1, true, 1e-6);
  check_against_reference("lm g1/g2", model, f.g2, g2, true, 1e-6);
  // summary.lm's printed Pr(>|t|) for g1: 2.979813125320707e-01.
  expect_relative("lm Wald log p", std::exp(confirm_variant(model, f.g1).wald_log_p),
                  2.979813125320707e-01, 1e-6, "Pr(>|t|)");
  // In a linear model the one-step estimate is the least-squares coefficient.
  expect_relative("lm score beta vs lm beta", score_one(model, f.g1).beta, g1.beta, 1e-6, "beta~");
}

TEST(NullModel, LogisticMatchesR) {
  const Fixture f = make_fixture();
  const NullModel model = fit_null_model("case", TraitKind::binary, f.yb, f.design, f.names);
  // R 4.2.2 stats::glm(yb ~ age + B + C, family=binomial,
  //                    control=glm.control(epsilon=1e-14, maxit=100)): coef(), logLik()
  const double coef[] = {-3.0472550622810237e+00, 8.3980099089626031e-02, 2.5787164284972550e+00,
                         5.8846001240897750e-01};
  for (int k = 0; k < 4; ++k) {
    expect_relative("glm null coefficients", model.coefficients[k], coef[k], 1e-4, model.column_names[k]);
  }
  expect_relative("glm null log-likelihood", model.log_likelihood, -1.7010125345006653e+01, 1e-4, "logLik");
  EXPECT_TRUE(model.converged);
  EXPECT_GT(model.iterations, 2);
  EXPECT_EQ(model.sigma2, 1.0);
  const Eigen::MatrixXd qtq = model.basis.transpose() * model.basis;
  EXPECT_LE((qtq - Eigen::MatrixXd::Identity(4, 4)).cwiseAbs().maxCoeff(), 1e-13);
  EXPECT_LE((model.design.transpose() * model.residuals).cwiseAbs().maxCoeff(), 1e-10);
}

TEST(Confirm, LogisticMatchesR) {
  const Fixture f = make_fixture();
  const NullModel model = fit_null_model("case", TraitKind::binary, f.yb, f.design, f.names);
  // R 4.2.2: glm(yb ~ age + B + C + g, binomial, glm.control(epsilon=1e-14, maxit=100)):
  // summary()$coefficients["g", ] (estimate, SE, z^2, pchisq(z^2, 1, log.p=TRUE)),
  // anova(b0, b1, test="LRT")$Deviance[2] and its pchisq log p; score written out
  // from the formula: U = g'(y - mu), V = g'Wg - g'WX (X'WX)^-1 X'Wg, W = diag(mu (1 - mu)).
  const Reference g1{1.7809891135328475e+00, 8.3255652548248071e-01, 4.5760954165107668e+00,
                     -3.4289485755556597e+00, 5.8502399388180102e+00, -4.1620928675930431e+00,
                     3.5730200508215524e+00, 2.3486141712214978e+00, 5.4357469353653336e+00,
                     -3.9256833105874334e+00};
  const Reference g2{-3.8927677067599492e-01, 8.8450908047644161e-01, 1.9369231331515283e-01,
                     -4.1572585829670972e-01, 1.9292651553872986e-01, -4.1477029110086194e-01,
                     -4.9214774463347111e-01, 1.2249546050157134e+00, 1.9772928854347652e-01,
                     -4.2074123271542008e-01};
  check_against_reference("glm g1/g2", model, f.g1, g1, false, 1e-4);
  check_against_reference("glm g1/g2", model, f.g2, g2, false, 1e-4);
  // summary.glm computes the SE from the weights at the start of its last
  // iteration; evaluated at the converged fit (R 4.2.2:
  // sqrt(diag(solve(t(X) %*% (X * w)))) with w = fitted(b1) (1 - fitted(b1))) it is:
  expect_relative("glm SE at the converged fit", confirm_variant(model, f.g1).se, 8.3255652548253500e-01,
                  1e-10, "g1");
  expect_relative("glm SE at the converged fit", confirm_variant(model, f.g2).se, 8.8450908087936020e-01,
                  1e-10, "g2");
}

// ---------------------------------------------------------------------------
// Properties
// ---------------------------------------------------------------------------

bool same_bits(const ScoreResult& a, const ScoreResult& b) {
  return std::memcmp(&a.u, &b.u, sizeof(double)) == 0 && std::memcmp(&a.v, &b.v, sizeof(double)) == 0 &&
         std::memcmp(&a.chisq, &b.chisq, sizeof(double)) == 0 &&
         std::memcmp(&a.log_p, &b.log_p, sizeof(double)) == 0 &&
         std::memcmp(&a.beta, &b.beta, sizeof(double)) == 0 &&
         std::memcmp(&a.se, &b.se, sizeof(double)) == 0 && a.testable == b.testable;
}

// A simulated cohort: n samples, intercept + 3 covariates, a trait of the given kind.
struct Cohort {
  Eigen::MatrixXd design;
  std::vector<std::string> names{"intercept", "x1", "x2", "x3"};
  Eigen::VectorXd y;
};

Cohort simulate_cohort(int n, TraitKind kind, Random& rng) {
  Cohort c;
  c.design.resize(n, 4);
  c.y.resize(n);
  for (int s = 0; s < n; ++s) {
    c.design(s, 0) = 1.0;
    c.design(s, 1) = rng.normal();
    c.design(s, 2) = rng.uniform() < 0.3 ? 1.0 : 0.0;
    c.design(s, 3) = 40.0 + 10.0 * rng.normal();
    const double eta = -0.5 + 0.4 * c.design(s, 1) + 0.5 * c.design(s, 2) + 0.01 * (c.design(s, 3) - 40.0);
    if (kind == TraitKind::quantitative) {
      c.y[s] = eta + rng.normal();
    } else {
      c.y[s] = rng.uniform() < 1.0 / (1.0 + std::exp(-eta)) ? 1.0 : 0.0;
    }
  }
  return c;
}

TEST(ScoreKernel, BlockedResultEqualsSingleColumnBitwise) {
  for (TraitKind kind : {TraitKind::quantitative, TraitKind::binary}) {
    Random rng(kind == TraitKind::binary ? 11 : 7);
    const int n = 301;
    Cohort cohort = simulate_cohort(n, kind, rng);
    if (kind == TraitKind::binary) {
      // Seven null-model columns instead of four, so the kernel's other
      // register-block shapes are exercised too.
      cohort.design.conservativeResize(Eigen::NoChange, 7);
      for (int s = 0; s < n; ++s) {
        cohort.design(s, 4) = cohort.design(s, 1) * cohort.design(s, 1);
        cohort.design(s, 5) = cohort.design(s, 2) * cohort.design(s, 3) / 40.0;
        cohort.design(s, 6) = rng.normal();
      }
      cohort.names.insert(cohort.names.end(), {"x1_squared", "x2_x3", "x4"});
    }
    const NullModel model = fit_null_model("sim", kind, cohort.y, cohort.design, cohort.names);
    ASSERT_EQ(model.column_count(), kind == TraitKind::binary ? 7 : 4);
    ScoreKernel kernel(model);
    ScoreScratch scratch;

    const std::size_t width = 150;  // more than two of the kernel's column tiles
    std::vector<double> block(static_cast<std::size_t>(n) * width);
    for (std::size_t j = 0; j < width; ++j) {
      const double freq = 0.01 + 0.45 * rng.uniform();
      for (int s = 0; s < n; ++s) {
        double value = rng.binomial2(freq);
        if (j % 3 == 0) value += 0.001 * static_cast<double>(rng.next() % 1000);  // dosages
        block[static_cast<std::size_t>(s) * width + j] = value;
      }
    }
    // One all-zero column and one in the covariate span.
    for (int s = 0; s < n; ++s) {
      block[static_cast<std::size_t>(s) * width + 5] = 0.0;
      block[static_cast<std::size_t>(s) * width + 6] = 2.0 * cohort.design(s, 2);
    }
    std::vector<ScoreResult> all(width);
    kernel.compute(block.data(), width, scratch, all.data());
    EXPECT_FALSE(all[5].testable);
    EXPECT_FALSE(all[6].testable);
    EXPECT_EQ(all[6].chisq, 0.0);
    EXPECT_EQ(all[6].log_p, 0.0);

    for (std::size_t j = 0; j < width; ++j) {
      // Alone.
      std::vector<double> column(static_cast<std::size_t>(n));
      for (int s = 0; s < n; ++s) column[static_cast<std::size_t>(s)] = block[static_cast<std::size_t>(s) * width + j];
      ScoreResult single;
      ScoreScratch fresh;
      kernel.compute(column.data(), 1, fresh, &single);
      ASSERT_TRUE(same_bits(single, all[j])) << "variant " << j << " alone";
      // At another position of a block of another width, among other columns.
      const std::size_t other_width = 1 + (j * 37) % 97;
      const std::size_t position = (j * 13) % other_width;
      std::vector<double> other(static_cast<std::size_t>(n) * other_width);
      for (int s = 0; s < n; ++s) {
        for (std::size_t k = 0; k < other_width; ++k) {
          other[static_cast<std::size_t>(s) * other_width + k] =
              k == position ? column[static_cast<std::size_t>(s)] : static_cast<double>(rng.binomial2(0.2));
        }
      }
      std::vector<ScoreResult> other_results(other_width);
      kernel.compute(other.data(), other_width, scratch, other_results.data());
      ASSERT_TRUE(same_bits(other_results[position], all[j]))
          << "variant " << j << " at position " << position << " of " << other_width;
    }
  }
}

// The kernel over every genotype sample, the analysis samples placed among
// others that weigh nothing, with missing dosages held as 0 and imputed
// through the list, gives the results of the kernel over the analysis
// samples alone with the same values imputed in place (to rounding: the
// imputed terms are summed last).
TEST(ScoreKernel, RowsAmongOthersWithImputationByListMatchTheAnalysisSamplesAlone) {
  for (TraitKind kind : {TraitKind::quantitative, TraitKind::binary}) {
    Random rng(kind == TraitKind::binary ? 23 : 29);
    const int n = 240;
    const Cohort cohort = simulate_cohort(n, kind, rng);
    const NullModel model = fit_null_model("sim", kind, cohort.y, cohort.design, cohort.names);
    // 300 genotype samples; every fifth is outside the analysis set.
    const std::size_t genotype_samples = 300;
    std::vector<std::size_t> row_of_sample;
    for (std::size_t row = 0; row < genotype_samples && row_of_sample.size() < static_cast<std::size_t>(n); ++row) {
      if (row % 5 != 4) row_of_sample.push_back(row);
    }
    ASSERT_EQ(row_of_sample.size(), static_cast<std::size_t>(n));
    const std::size_t width = 19;
    std::vector<double> all_rows(genotype_samples * width), analysis_rows(static_cast<std::size_t>(n) * width);
    std::vector<std::uint32_t> missing_rows;
    std::vector<std::size_t> starts(width + 1, 0);
    std::vector<double> fills(width);
    for (std::size_t j = 0; j < width; ++j) {
      fills[j] = 0.1 + 0.05 * static_cast<double>(j);
      for (std::size_t row = 0; row < genotype_samples; ++row) {
        const bool missing = (row * 7 + j * 3) % 11 == 0;
        const double value = missing ? 0.0 : static_cast<double>(rng.binomial2(0.3));
        all_rows[row * width + j] = value;
        if (missing) missing_rows.push_back(static_cast<std::uint32_t>(row));
      }
      starts[j + 1] = missing_rows.size();
    }
    for (std::size_t s = 0; s < row_of_sample.size(); ++s) {
      for (std::size_t j = 0; j < width; ++j) {
        const std::size_t row = row_of_sample[s];
        const bool missing = (row * 7 + j * 3) % 11 == 0;
        analysis_rows[s * width + j] = missing ? fills[j] : all_rows[row * width + j];
      }
    }
    const ScoreKernel alone(model), among_others(model, row_of_sample, genotype_samples);
    EXPECT_EQ(among_others.row_count(), genotype_samples);
    ScoreScratch scratch;
    std::vector<ScoreResult> expected(width), got(width);
    alone.compute(analysis_rows.data(), width, scratch, expected.data());
    const ImputedDosages imputed{missing_rows.data(), starts.data(), fills.data()};
    among_others.compute(all_rows.data(), width, scratch, got.data(), &imputed);
    for (std::size_t j = 0; j < width; ++j) {
      EXPECT_NEAR(got[j].u, expected[j].u, 1e-10 * (1.0 + std::abs(expected[j].u))) << j;
      EXPECT_NEAR(got[j].v, expected[j].v, 1e-10 * expected[j].v) << j;
      EXPECT_NEAR(got[j].chisq, expected[j].chisq, 1e-9 * (1.0 + expected[j].chisq)) << j;
    }
  }
}

TEST(ScoreKernel, MatchesTheFormulaOnSimulatedData) {
  // Formula: U = G'r, V = G'WG - G'WX (X'WX)^-1 X'WG (times sigma2 for linear models).
  for (TraitKind kind : {TraitKind::quantitative, TraitKind::binary}) {
    Random rng(99);
    const Cohort cohort = simulate_cohort(500, kind, rng);
    const NullModel model = fit_null_model("sim", kind, cohort.y, cohort.design, cohort.names);
    Eigen::VectorXd g(500);
    for (int s = 0; s < 500; ++s) g[s] = rng.binomial2(0.3);
    const Eigen::MatrixXd& x = model.design;
    const Eigen::VectorXd w = model.weights;
    const Eigen::MatrixXd xtw = x.transpose() * w.asDiagonal();
    const Eigen::VectorXd xtwg = xtw * g;
    const double v_raw = g.dot(w.asDiagonal() * g) - xtwg.dot((xtw * x).ldlt().solve(xtwg));
    const double v = model.kind == TraitKind::quantitative ? model.sigma2 * v_raw : v_raw;
    const ScoreResult score = score_one(model, g);
    expect_relative("score vs formula (simulated)", score.u, g.dot(model.residuals), 1e-10, "U");
    expect_relative("score vs formula (simulated)", score.v, v, 1e-10, "V");
  }
}

TEST(NullModel, CollinearColumnsAreDroppedAndNamed) {
  const Fixture f = make_fixture();
  const int n = static_cast<int>(f.y.size());
  Eigen::MatrixXd design(n, 7);
  design.col(0) = f.design.col(0);
  design.col(1) = f.design.col(1);
  design.col(2) = Eigen::VectorXd::Zero(n);                                    // empty
  design.col(3) = f.design.col(2);
  design.col(4) = 3.0 * f.design.col(1) - 7.0 * f.design.col(0);               // age rescaled
  design.col(5) = f.design.col(3);
  design.col(6) = f.design.col(0) - f.design.col(2) - f.design.col(3);         // level A
  const std::vector<std::string> names{"intercept", "age", "empty", "level_B", "age_months", "level_C", "level_A"};
  for (TraitKind kind : {TraitKind::quantitative, TraitKind::binary}) {
    const Eigen::VectorXd& y = kind == TraitKind::binary ? f.yb : f.y;
    const NullModel model = fit_null_model("trait", kind, y, design, names);
    EXPECT_EQ(model.dropped_columns, (std::vector<std::string>{"empty", "age_months", "level_A"}));
    EXPECT_EQ(model.column_names, f.names);
    EXPECT_EQ(model.design, f.design);
    const NullModel plain = fit_null_model("trait", kind, y, f.design, f.names);
    EXPECT_LE((model.coefficients - plain.coefficients).cwiseAbs().maxCoeff(), 1e-12);
  }
}

TEST(Confirm, LikelihoodRatioInvariantToRescalingTheGenotype) {
  const Fixture f = make_fixture();
  for (TraitKind kind : {TraitKind::quantitative, TraitKind::binary}) {
    const Eigen::VectorXd& y = kind == TraitKind::binary ? f.yb : f.y;
    const NullModel model = fit_null_model("trait", kind, y, f.design, f.names);
    const ConfirmResult base = confirm_variant(model, f.g1);
    const ScoreResult base_score = score_one(model, f.g1);
    for (double scale : {2.5, -0.5, 10.0}) {
      for (double shift : {0.0, 1.0, -3.25}) {
        const Eigen::VectorXd g = (scale * f.g1.array() + shift).matrix();
        const ConfirmResult changed = confirm_variant(model, g);
        EXPECT_LE(relative_error(changed.lrt_chisq, base.lrt_chisq), 1e-9) << scale << " " << shift;
        EXPECT_LE(relative_error(changed.beta * scale, base.beta), 1e-9);
        // The score test is invariant too (the intercept absorbs the shift).
        EXPECT_LE(relative_error(score_one(model, g).chisq, base_score.chisq), 1e-9);
      }
    }
  }
}

TEST(Confirm, ScoreWaldAndLikelihoodRatioAgreeAsSamplesGrow) {
  // Local alternatives beta = 2 / sqrt(n): the three statistics estimate the
  // same quantity and their differences are O(1 / sqrt(n)).
  for (TraitKind kind : {TraitKind::quantitative, TraitKind::binary}) {
    std::vector<double> mean_difference;
    for (int n : {100, 1000, 10000}) {
      Random rng(2024 + n);
      double total = 0.0;
      const int replicates = 12;
      for (int rep = 0; rep < replicates; ++rep) {
        Cohort cohort = simulate_cohort(n, kind, rng);
        Eigen::VectorXd g(n);
        const double beta = 2.0 / std::sqrt(static_cast<double>(n));
        for (int s = 0; s < n; ++s) {
          g[s] = rng.binomial2(0.25);
          if (kind == TraitKind::quantitative) {
            cohort.y[s] += beta * g[s];
          } else if (rng.uniform() < beta * g[s] * 0.25) {
            cohort.y[s] = 1.0;
          }
        }
        const NullModel model = fit_null_model("sim", kind, cohort.y, cohort.design, cohort.names);
        const ConfirmResult confirmed = confirm_variant(model, g);
        const ScoreResult score = score_one(model, g);
        ASSERT_TRUE(confirmed.converged);
        const double lr = confirmed.lrt_chisq;
        total += (std::fabs(score.chisq - lr) + std::fabs(confirmed.wald_chisq - lr)) / (lr + 1.0);
      }
      mean_difference.push_back(total / replicates);
    }
    EXPECT_LT(mean_difference[1], mean_difference[0]) << trait_kind_name(kind);
    EXPECT_LT(mean_difference[2], mean_difference[1]) << trait_kind_name(kind);
    std::cout << "[ asymptotics ] " << trait_kind_name(kind) << " mean |T - LR| / (LR + 1) at n = 100, 1000, 10000: "
              << mean_difference[0] << ", " << mean_difference[1] << ", " << mean_difference[2] << "\n";
  }
}

TEST(Confirm, SeparatedVariantStaysFinite) {
  const Fixture f = make_fixture();
  const NullModel model = fit_null_model("case", TraitKind::binary, f.yb, f.design, f.names);
  // Carried only by cases: the MLE diverges (complete separation on g).
  Eigen::VectorXd g = Eigen::VectorXd::Zero(f.yb.size());
  int carriers = 0;
  for (Eigen::Index s = 0; s < g.size() && carriers < 4; ++s) {
    if (f.yb[s] == 1.0) {
      g[s] = 1.0;
      ++carriers;
    }
  }
  const ConfirmResult result = confirm_variant(model, g);
  EXPECT_FALSE(result.converged);
  for (double value : {result.beta, result.se, result.wald_chisq, result.wald_log_p, result.lrt_chisq, result.lrt_log_p}) {
    EXPECT_TRUE(std::isfinite(value));
  }
  EXPECT_GT(result.beta, 5.0);
  EXPECT_GT(result.iterations, 0);
}

TEST(Confirm, VariantInTheCovariateSpanIsNotEstimable) {
  const Fixture f = make_fixture();
  for (TraitKind kind : {TraitKind::quantitative, TraitKind::binary}) {
    const NullModel model = fit_null_model("t", kind, kind == TraitKind::binary ? f.yb : f.y, f.design, f.names);
    const Eigen::VectorXd g = f.design.col(2) * 2.0;
    const ConfirmResult result = confirm_variant(model, g);
    EXPECT_FALSE(result.converged);
    EXPECT_EQ(result.lrt_log_p, 0.0);
    EXPECT_FALSE(score_one(model, g).testable);
  }
}

ExitCode code_of(const std::function<void()>& action, std::string* message) {
  try {
    action();
  } catch (const Error& error) {
    *message = error.what();
    return error.code();
  }
  return ExitCode::success;
}

TEST(NullModel, ErrorsNameTheTraitAndAFix) {
  const Fixture f = make_fixture();
  std::string message;
  // Constant traits.
  const Eigen::VectorXd constant = Eigen::VectorXd::Constant(f.y.size(), 2.5);
  EXPECT_EQ(code_of([&] { fit_null_model("bmi", TraitKind::quantitative, constant, f.design, f.names); }, &message),
            ExitCode::model);
  EXPECT_NE(message.find("bmi"), std::string::npos) << message;
  EXPECT_NE(message.find("constant"), std::string::npos) << message;
  const Eigen::VectorXd no_cases = Eigen::VectorXd::Zero(f.y.size());
  EXPECT_EQ(code_of([&] { fit_null_model("t2d", TraitKind::binary, no_cases, f.design, f.names); }, &message),
            ExitCode::model);
  EXPECT_NE(message.find("t2d"), std::string::npos) << message;

  // No residual degrees of freedom: n = 5 samples, p = 4 columns.
  const Eigen::MatrixXd small = f.design.topRows(5);
  const Eigen::VectorXd small_y = f.y.head(5);
  EXPECT_EQ(code_of([&] { fit_null_model("ldl", TraitKind::quantitative, small_y, small, f.names); }, &message),
            ExitCode::model);
  EXPECT_NE(message.find("ldl"), std::string::npos) << message;
  EXPECT_NE(message.find("5 samples"), std::string::npos) << message;
  EXPECT_NE(message.find("4 null-model columns"), std::string::npos) << message;
  EXPECT_NE(message.find("fewer covariates"), std::string::npos) << message;
  // n = 6, p = 4 leaves one residual degree of freedom with the variant: allowed.
  EXPECT_NO_THROW(fit_null_model("ldl", TraitKind::quantitative, f.y.head(6), f.design.topRows(6), f.names));

  // A covariate that separates cases from controls in the null model.
  Eigen::MatrixXd separating = f.design;
  separating.col(1) = (f.yb.array() * 2.0 - 1.0).matrix() + 0.01 * f.design.col(1);
  std::vector<std::string> names = f.names;
  names[1] = "smoker";
  EXPECT_EQ(code_of([&] { fit_null_model("cad", TraitKind::binary, f.yb, separating, names); }, &message),
            ExitCode::model);
  EXPECT_NE(message.find("cad"), std::string::npos) << message;
  EXPECT_NE(message.find("smoker"), std::string::npos) << message;

  // A binary trait that is not 0/1.
  EXPECT_EQ(code_of([&] { fit_null_model("cad", TraitKind::binary, f.y, f.design, f.names); }, &message),
            ExitCode::model);
}

}  // namespace
}  // namespace tamis
