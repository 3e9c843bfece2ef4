// Families in `tamis simulate` (--families, --heritability): the pedigree file,
// Mendelian transmission, the planted heritability, and the inflation that
// relatives sharing a polygenic trait give a plain scan.
#include <gtest/gtest.h>

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <map>
#include <set>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

std::string simulate(const std::string& prefix, const std::string& options) {
  return tamis_binary() + " simulate --out " + prefix + " " + options + " 2>/dev/null";
}

struct Relative {
  std::string family, participant, father, mother, role, structure;
};

std::vector<Relative> read_families(const std::string& path) {
  const std::vector<std::string> lines = lines_of(read_text_file(path));
  EXPECT_EQ(lines.at(0), "family\tparticipant\tfather\tmother\trole\tstructure");
  std::vector<Relative> relatives;
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
    if (lines[line_idx].empty()) continue;
    const auto fields = split_fields(lines[line_idx]);
    EXPECT_EQ(fields.size(), 6u) << lines[line_idx];
    if (fields.size() != 6) continue;
    relatives.push_back({fields[0], fields[1], fields[2], fields[3], fields[4], fields[5]});
  }
  return relatives;
}

// The traits table by participant: its fields by column name.
std::map<std::string, std::map<std::string, std::string>> read_table(const std::string& path) {
  const std::vector<std::string> lines = lines_of(read_text_file(path));
  const auto header = split_fields(lines.at(0));
  std::map<std::string, std::map<std::string, std::string>> table;
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
    if (lines[line_idx].empty()) continue;
    const auto fields = split_fields(lines[line_idx]);
    for (std::size_t column = 0; column < header.size(); ++column) table[fields[0]][header[column]] = fields[column];
  }
  return table;
}

std::vector<std::string> vcf_samples(const std::vector<std::string>& vcf_lines) {
  for (const std::string& line : vcf_lines) {
    if (line.rfind("#CHROM", 0) == 0) {
      const auto fields = split_fields(line);
      return std::vector<std::string>(fields.begin() + 9, fields.end());
    }
  }
  return {};
}

// λ_GC = median(T) / 0.454936, 0.454936 being the median of χ²(1) (Devlin & Roeder 1999),
// over the score statistics of variants with a minor allele frequency of at least 1%.
double inflation_of(const std::string& results_path) {
  std::vector<double> statistics;
  for (const auto& row : data_rows(read_gzip_file(results_path))) {
    const double frequency = std::stod(row.at(6));
    if (frequency < 0.01 || frequency > 0.99) continue;
    statistics.push_back(std::stod(row.at(15)));  // score_chisq
  }
  EXPECT_GT(statistics.size(), 500u);
  std::sort(statistics.begin(), statistics.end());
  const std::size_t middle = statistics.size() / 2;
  const double median = statistics.size() % 2 ? statistics[middle] : 0.5 * (statistics[middle - 1] + statistics[middle]);
  return median / 0.454936;
}

class Families : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("families");
    ASSERT_EQ(run_command(simulate(dir_ + "/cohort", "--samples 400 --variants 300 --seed 21 --families 0.5")), 0);
  }
  static std::string dir_;
};
std::string Families::dir_;

TEST_F(Families, FileListsEverySampleOnceAndAConsistentPedigree) {
  const std::vector<Relative> relatives = read_families(dir_ + "/cohort.families.tsv");
  const std::vector<std::string> samples = vcf_samples(lines_of(read_gzip_file(dir_ + "/cohort.vcf.gz")));
  ASSERT_EQ(samples.size(), 400u);
  const auto table = read_table(dir_ + "/cohort.traits.tsv");

  std::map<std::string, const Relative*> by_id;
  std::vector<std::string> genotyped;
  std::map<std::string, std::vector<const Relative*>> members;
  for (const Relative& relative : relatives) {
    // Parents are listed before their children, and every ID once.
    for (const std::string* parent : {&relative.father, &relative.mother}) {
      if (*parent != "NA") {
        ASSERT_TRUE(by_id.count(*parent)) << relative.participant << " listed before its parent " << *parent;
        EXPECT_EQ(by_id[*parent]->family, relative.family);
      }
    }
    EXPECT_EQ(relative.father == "NA", relative.mother == "NA") << relative.participant;
    ASSERT_TRUE(by_id.emplace(relative.participant, &relative).second) << relative.participant;
    if (relative.role != "ancestor") genotyped.push_back(relative.participant);
    if (relative.family != "NA") members[relative.family].push_back(&relative);
    if (relative.role == "unrelated") {
      EXPECT_EQ(relative.family + relative.father + relative.mother + relative.structure, "NANANANA");
    } else {
      EXPECT_EQ(relative.family.rfind("saltmarsh_f", 0), 0u) << relative.family;
    }
    if (relative.role == "ancestor") {
      EXPECT_EQ(relative.participant.rfind("saltmarsh_a", 0), 0u);
    }
    if (relative.role == "child") {
      EXPECT_NE(relative.father, "NA");
    }
    // Fathers are men and mothers women, in the table where the value is not missing.
    for (const auto& [parent, sex] : {std::make_pair(relative.father, "M"), std::make_pair(relative.mother, "F")}) {
      if (table.count(parent) && table.at(parent).at("sex") != "NA") {
        EXPECT_EQ(table.at(parent).at("sex"), sex);
      }
    }
  }
  // The genotyped people are exactly the VCF's samples, in its order.
  EXPECT_EQ(genotyped, samples);

  std::size_t in_families = 0;
  for (const auto& [family, people] : members) {
    std::size_t genotyped_members = 0;
    std::set<std::string> fathers, mothers, structures;
    for (const Relative* person : people) {
      structures.insert(person->structure);
      if (person->role == "ancestor") continue;
      ++genotyped_members;
      if (person->role != "child") continue;
      fathers.insert(person->father);
      mothers.insert(person->mother);
    }
    in_families += genotyped_members;
    EXPECT_GE(genotyped_members, 2u) << family;
    EXPECT_LE(genotyped_members, 6u) << family;
    ASSERT_EQ(structures.size(), 1u) << family;
    const std::string structure = *structures.begin();
    if (structure == "nuclear" || structure == "sibship") {
      // One couple; in a nuclear family the parents are genotyped.
      EXPECT_EQ(fathers.size(), 1u) << family;
      EXPECT_EQ(mothers.size(), 1u) << family;
      const bool parents_genotyped = by_id.at(*fathers.begin())->role == "father" &&
                                     by_id.at(*mothers.begin())->role == "mother";
      EXPECT_EQ(parents_genotyped, structure == "nuclear") << family;
    } else if (structure == "half_sibship") {
      EXPECT_EQ(fathers.size(), 2u) << family;
      EXPECT_EQ(mothers.size(), 1u) << family;
    } else {
      ASSERT_EQ(structure, "cousins");
      // Two couples; the son's and the daughter's parents are the same grandparents.
      ASSERT_EQ(fathers.size(), 2u) << family;
      ASSERT_EQ(mothers.size(), 2u) << family;
      std::set<std::string> grandparents;
      for (const std::set<std::string>* parents : {&fathers, &mothers}) {
        for (const std::string& parent : *parents) {
          const Relative* person = by_id.at(parent);
          if (person->father != "NA") grandparents.insert(person->father + "+" + person->mother);
        }
      }
      EXPECT_EQ(grandparents.size(), 1u) << family;
    }
  }
  // --families 0.5 of 400: 200 in families (one fewer when the last family would have had one member).
  EXPECT_GE(in_families, 199u);
  EXPECT_LE(in_families, 200u);
}

TEST_F(Families, ChildrensGenotypesFollowTheirParents) {
  const std::vector<Relative> relatives = read_families(dir_ + "/cohort.families.tsv");
  const std::vector<std::string> vcf = lines_of(read_gzip_file(dir_ + "/cohort.vcf.gz"));
  const std::vector<std::string> samples = vcf_samples(vcf);
  std::map<std::string, std::size_t> column;
  for (std::size_t sample_idx = 0; sample_idx < samples.size(); ++sample_idx) column[samples[sample_idx]] = 9 + sample_idx;
  struct Trio {
    std::size_t child, father, mother;
  };
  std::vector<Trio> trios;
  for (const Relative& relative : relatives) {
    if (relative.role == "child" && column.count(relative.father) && column.count(relative.mother)) {
      trios.push_back({column[relative.participant], column[relative.father], column[relative.mother]});
    }
  }
  ASSERT_GE(trios.size(), 10u);

  // A child's two alleles must be one of the father's and one of the mother's.
  auto alleles = [](const std::string& cell) { return std::make_pair(cell[0], cell[2]); };
  auto consistent = [&](const std::string& child, const std::string& father, const std::string& mother) {
    const auto [first, second] = alleles(child);
    const auto [father_1, father_2] = alleles(father);
    const auto [mother_1, mother_2] = alleles(mother);
    auto from_father = [&](char allele) { return allele == father_1 || allele == father_2; };
    auto from_mother = [&](char allele) { return allele == mother_1 || allele == mother_2; };
    return (from_father(first) && from_mother(second)) || (from_father(second) && from_mother(first));
  };
  std::size_t checked = 0, errors = 0, errors_with_wrong_father = 0;
  for (const std::string& line : vcf) {
    if (line.empty() || line[0] == '#') continue;
    const auto fields = split_fields(line);
    for (std::size_t trio_idx = 0; trio_idx < trios.size(); ++trio_idx) {
      const Trio& trio = trios[trio_idx];
      // A father from another family: the check must be able to fail.
      const std::size_t stranger = trios[(trio_idx + 1) % trios.size()].father;
      const std::string& child = fields[trio.child];
      if (child[0] == '.' || fields[trio.father][0] == '.' || fields[trio.mother][0] == '.' || fields[stranger][0] == '.') {
        continue;
      }
      ++checked;
      if (!consistent(child, fields[trio.father], fields[trio.mother])) ++errors;
      if (!consistent(child, fields[stranger], fields[trio.mother])) ++errors_with_wrong_father;
    }
  }
  EXPECT_GT(checked, 3000u);
  EXPECT_EQ(errors, 0u);
  EXPECT_GT(errors_with_wrong_father, 50u);
}

TEST_F(Families, SameSeedSameFilesAndHeritabilityChangesOnlyTheTraits) {
  const std::string again = dir_ + "/again", heritable = dir_ + "/heritable";
  ASSERT_EQ(run_command(simulate(again, "--samples 400 --variants 300 --seed 21 --families 0.5")), 0);
  ASSERT_EQ(run_command(simulate(heritable, "--samples 400 --variants 300 --seed 21 --families 0.5 --heritability 0.5")), 0);
  for (const char* suffix : {".vcf.gz", ".traits.tsv", ".truth.tsv", ".families.tsv"}) {
    EXPECT_EQ(read_text_file(dir_ + "/cohort" + suffix), read_text_file(again + suffix)) << suffix;
  }
  // The polygenic loci have a random stream of their own: the genotypes and the pedigree stay.
  for (const char* suffix : {".vcf.gz", ".truth.tsv", ".families.tsv"}) {
    EXPECT_EQ(read_text_file(dir_ + "/cohort" + suffix), read_text_file(heritable + suffix)) << suffix;
  }
  EXPECT_NE(read_text_file(dir_ + "/cohort.traits.tsv"), read_text_file(heritable + ".traits.tsv"));
}

TEST_F(Families, WithoutFamiliesNoFamilyFileAndTheSameCohort) {
  const std::string plain = dir_ + "/plain", zero = dir_ + "/zero";
  ASSERT_EQ(run_command(simulate(plain, "--samples 100 --variants 50 --seed 4")), 0);
  ASSERT_EQ(run_command(simulate(zero, "--samples 100 --variants 50 --seed 4 --families 0 --heritability 0")), 0);
  EXPECT_FALSE(file_exists(plain + ".families.tsv"));
  for (const char* suffix : {".vcf.gz", ".traits.tsv", ".truth.tsv"}) {
    EXPECT_EQ(read_text_file(plain + suffix), read_text_file(zero + suffix)) << suffix;
  }
}

TEST_F(Families, OutOfRangeOptionsAreRefused) {
  const std::string prefix = dir_ + "/refused";
  EXPECT_NE(run_command(simulate(prefix, "--families 1.5")), 0);
  EXPECT_NE(run_command(simulate(prefix, "--families -0.1")), 0);
  EXPECT_NE(run_command(simulate(prefix, "--heritability 1")), 0);
  EXPECT_FALSE(file_exists(prefix + ".vcf.gz"));
}

// Residuals of fev1_litres on the covariates that the simulation gives it (age,
// sex, village, ancestry through pc1), by least squares.
std::map<std::string, double> fev1_residuals(const std::map<std::string, std::map<std::string, std::string>>& table) {
  std::vector<std::string> ids;
  for (const auto& [id, fields] : table) {
    bool complete = true;
    for (const char* column : {"age", "sex", "village", "pc1", "fev1_litres"}) complete &= fields.at(column) != "NA";
    if (complete && id.rfind("SR9", 0) != 0) ids.push_back(id);  // SR9xxxx were never genotyped
  }
  Eigen::MatrixXd design(ids.size(), 6);
  Eigen::VectorXd trait(ids.size());
  for (std::size_t row = 0; row < ids.size(); ++row) {
    const auto& fields = table.at(ids[row]);
    design.row(row) << 1.0, std::stod(fields.at("age")), fields.at("sex") == "F" ? 1.0 : 0.0,
        fields.at("village") == "gull_point" ? 1.0 : 0.0, fields.at("village") == "reedmouth" ? 1.0 : 0.0,
        std::stod(fields.at("pc1"));
    trait(row) = std::stod(fields.at("fev1_litres"));
  }
  const Eigen::VectorXd residuals = trait - design * design.colPivHouseholderQr().solve(trait);
  std::map<std::string, double> by_id;
  for (std::size_t row = 0; row < ids.size(); ++row) by_id[ids[row]] = residuals(row);
  return by_id;
}

// One pair of full siblings per family (the first two children of one couple).
std::vector<std::pair<std::string, std::string>> sibling_pairs(const std::vector<Relative>& relatives) {
  std::map<std::string, std::vector<std::string>> children_of_couple;
  for (const Relative& relative : relatives) {
    if (relative.role == "child") children_of_couple[relative.father + "+" + relative.mother].push_back(relative.participant);
  }
  std::set<std::string> families_used;
  std::map<std::string, std::string> family_of;
  for (const Relative& relative : relatives) family_of[relative.participant] = relative.family;
  std::vector<std::pair<std::string, std::string>> pairs;
  for (const auto& [couple, children] : children_of_couple) {
    if (children.size() < 2 || !families_used.insert(family_of[children[0]]).second) continue;
    pairs.emplace_back(children[0], children[1]);
  }
  return pairs;
}

struct PairCorrelation {
  double correlation = 0.0;
  std::size_t pairs = 0;
  double residual_variance = 0.0;
};

PairCorrelation sibling_correlation(const std::string& prefix) {
  const auto residuals = fev1_residuals(read_table(prefix + ".traits.tsv"));
  std::vector<double> first, second;
  for (const auto& [one, other] : sibling_pairs(read_families(prefix + ".families.tsv"))) {
    if (!residuals.count(one) || !residuals.count(other)) continue;
    first.push_back(residuals.at(one));
    second.push_back(residuals.at(other));
  }
  PairCorrelation result;
  result.pairs = first.size();
  const Eigen::Map<Eigen::ArrayXd> x(first.data(), first.size()), y(second.data(), second.size());
  const Eigen::ArrayXd dx = x - x.mean(), dy = y - y.mean();
  result.correlation = (dx * dy).sum() / std::sqrt(dx.square().sum() * dy.square().sum());
  double sum_squares = 0.0;
  for (const auto& [id, residual] : residuals) sum_squares += residual * residual;
  result.residual_variance = sum_squares / static_cast<double>(residuals.size() - 6);
  return result;
}

// Full siblings share half of the additive genetic variance, so their trait
// correlation after the covariates is h²/2 (Fisher 1918; common practice).
// Bound: Fisher's z = atanh(r) has standard error 1/sqrt(pairs - 3) for
// bivariate normal pairs; the pairs are from different families, so they are
// independent; 3.29 standard errors is the two-sided 99.9% interval.
TEST(FamiliesHeritability, SiblingCorrelationIsHalfTheHeritability) {
  const std::string dir = make_temp_dir("families_heritability");
  for (const double heritability : {0.6, 0.0}) {
    const std::string prefix = dir + "/h" + std::to_string(static_cast<int>(heritability * 10));
    ASSERT_EQ(run_command(simulate(prefix, "--samples 8000 --variants 20 --causal 0 --missing-rate 0 --seed 31 "
                                           "--families 1 --heritability " + std::to_string(heritability))),
              0);
    const PairCorrelation result = sibling_correlation(prefix);
    std::printf("h² %.1f: sibling correlation %.3f over %zu pairs, residual variance %.4f\n", heritability,
                result.correlation, result.pairs, result.residual_variance);
    ASSERT_GT(result.pairs, 800u);
    const double bound = 3.29 / std::sqrt(static_cast<double>(result.pairs) - 3.0);
    EXPECT_NEAR(std::atanh(result.correlation), std::atanh(heritability / 2.0), bound)
        << "h² " << heritability << ": r = " << result.correlation << " over " << result.pairs << " pairs";
    // The polygenic part replaces part of the noise: the residual variance stays 0.5² litres²
    // (standard error 0.25·sqrt(2/n) ≈ 0.004 for independent samples; relatives widen it a little).
    EXPECT_NEAR(result.residual_variance, 0.25, 0.025) << "h² " << heritability;
  }
}

// A plain scan treats relatives as independent: with a heritable trait their
// shared genotypes and trait inflate the null statistics. The expected λ is
// about 1 + h²·Σ_{i≠j} A_ij² / n (A: the coefficients of relationship), which
// for this pedigree with every sample in a family is about 1 + 0.6·0.73 ≈ 1.44.
// λ of 2,000 variants in linkage blocks varies by about 0.1 between seeds: over
// seeds 11 to 19 it ranged from 1.27 to 1.52 at h² = 0.6 and from 0.97 to 1.14
// for the same genotypes at h² = 0 (no inflation expected), the gap from 0.21 to 0.48.
TEST(FamiliesHeritability, PlainScanOfANullFamilyCohortIsInflated) {
  const std::string dir = make_temp_dir("families_inflation");
  double inflation[2] = {0.0, 0.0};
  for (int with_heritability = 0; with_heritability < 2; ++with_heritability) {
    const std::string prefix = dir + "/h" + std::to_string(with_heritability);
    ASSERT_EQ(run_command(simulate(prefix, std::string("--samples 3000 --variants 2000 --causal 0 --seed 11 "
                                                       "--families 1 --heritability ") +
                                               (with_heritability ? "0.6" : "0"))),
              0);
    ASSERT_EQ(run_command(tamis_binary() + " scan --genotypes " + prefix + ".vcf.gz --traits " + prefix +
                          ".traits.tsv --trait fev1_litres --covariates age,sex,village,pc1,pc2,pc3,pc4 --quiet "
                          "--threads 2 --out " + prefix + "_scan"),
              0);
    inflation[with_heritability] = inflation_of(prefix + "_scan.fev1_litres.tsv.gz");
  }
  std::printf("plain scan λ_GC: %.3f at h² 0, %.3f at h² 0.6\n", inflation[0], inflation[1]);
  EXPECT_GT(inflation[1], 1.2);
  EXPECT_LT(inflation[0], 1.2);
  EXPECT_GT(inflation[1] - inflation[0], 0.15);
}

}  // namespace
}  // namespace tamis::testing
