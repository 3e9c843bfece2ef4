// The people of the simulated cohort: unrelated residents and, with
// --families, families whose members inherit from their parents.
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "random.hpp"
#include "tamis/simulate.hpp"

namespace tamis::simulation {

struct Village {
  const char* name;
  double mean_ancestry;  // share of founding group A
  double fev1_shift;
};
constexpr Village kVillages[] = {{"hollin_bay", 0.2, 0.0}, {"gull_point", 0.5, 0.1}, {"reedmouth", 0.8, -0.15}};

// How a person stands in the families file. Ancestors are not genotyped: they
// are listed so that half-siblings and cousins can be traced to a shared parent
// or grandparent.
enum class FamilyRole { unrelated, father, mother, child, ancestor };
enum class FamilyStructure { nuclear, sibship, half_sibship, cousins };

struct Person {
  std::string id;
  int age = 0;
  bool female = false;
  int village = 0;
  double ancestry = 0.0;
  double pcs[4] = {0, 0, 0, 0};
  bool in_table = true;
  bool genotyped = true;
  int father = -1;  // index into Cohort::people; -1 for a founder
  int mother = -1;
  int family = -1;  // index into Cohort::families; -1 for an unrelated sample
  FamilyRole role = FamilyRole::unrelated;
  bool is_founder() const { return father < 0; }
};

struct Family {
  std::string id;
  FamilyStructure structure = FamilyStructure::nuclear;
};

struct Cohort {
  std::vector<Person> people;        // parents before their children
  std::vector<std::size_t> samples;  // the genotyped people, in the order of the VCF columns
  std::vector<Family> families;
};

// Without families every person is an unrelated, genotyped sample drawn from
// `random` alone; with them the families' shapes come from their own stream.
Cohort make_cohort(const SimulationOptions& options, Random& random);

void write_families(const Cohort& cohort, const std::string& path);

}  // namespace tamis::simulation
