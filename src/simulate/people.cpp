#include "people.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <utility>

#include "tamis/results_writer.hpp"

namespace tamis::simulation {
namespace {

constexpr std::uint64_t kFamilyStream = 1;

// Shares of the family shapes, in the order of FamilyStructure.
constexpr double kNuclearShare = 0.35;
constexpr double kSibshipShare = 0.35;
constexpr double kHalfSibshipShare = 0.15;  // the rest are pairs of cousin sibships

double clamp(double value, double low, double high) { return std::min(high, std::max(low, value)); }

double draw_ancestry(int village, Random& random) {
  return clamp(kVillages[village].mean_ancestry + 0.12 * random.normal(), 0.0, 1.0);
}

// The principal-component-like covariates: the first follows ancestry, the others are noise.
void draw_pcs(Person& person, Random& random) {
  person.pcs[0] = 0.08 * (person.ancestry - 0.5) + 0.004 * random.normal();
  for (int pc_idx = 1; pc_idx < 4; ++pc_idx) person.pcs[pc_idx] = 0.02 * random.normal();
}

Person draw_unrelated_person(Random& random) {
  Person person;
  person.age = 18 + static_cast<int>(random.index(63));
  person.female = random.bernoulli(0.5);
  person.village = static_cast<int>(random.index(3));
  person.ancestry = draw_ancestry(person.village, random);
  draw_pcs(person, random);
  // About one in a hundred genotyped people never filled in the questionnaire.
  person.in_table = !random.bernoulli(0.01);
  return person;
}

// A family's shape: who is genotyped follows from the structure. Nuclear
// families are both parents and `first_children`; a sibship is full siblings
// whose parents were not genotyped; half-siblings share a mother and have one of
// two fathers; cousins are the children of a brother and of a sister.
struct FamilyPlan {
  FamilyStructure structure = FamilyStructure::sibship;
  int village = 0;
  int first_children = 0;
  int second_children = 0;  // half-siblings by the second father, or the sister's children
};

int genotyped_members(const FamilyPlan& plan) {
  return plan.first_children + plan.second_children + (plan.structure == FamilyStructure::nuclear ? 2 : 0);
}

// Families of 2 to 6 genotyped members until `members_wanted` are placed.
std::vector<FamilyPlan> plan_families(int members_wanted, Random& random) {
  std::vector<FamilyPlan> plans;
  int remaining = members_wanted;
  while (remaining >= 2) {
    FamilyPlan plan;
    plan.village = static_cast<int>(random.index(3));
    const int size = std::min(remaining, 2 + static_cast<int>(random.index(5)));
    const double shape = random.uniform();
    if (shape < kNuclearShare && size >= 3) {
      plan.structure = FamilyStructure::nuclear;
      plan.first_children = size - 2;
    } else if (shape < kNuclearShare + kSibshipShare) {
      plan.structure = FamilyStructure::sibship;
      plan.first_children = size;
    } else {
      const bool half = shape < kNuclearShare + kSibshipShare + kHalfSibshipShare;
      plan.structure = half ? FamilyStructure::half_sibship : FamilyStructure::cousins;
      plan.first_children = 1 + static_cast<int>(random.index(static_cast<std::size_t>(size - 1)));
      plan.second_children = size - plan.first_children;
    }
    plans.push_back(plan);
    remaining -= genotyped_members(plan);
  }
  return plans;
}

// Adds one family to the cohort, parents before children. Founders come from
// the family's village; a child's ancestry is the mean of its parents'.
class FamilyBuilder {
 public:
  FamilyBuilder(Cohort& cohort, Random& random) : cohort_(cohort), random_(random) {}

  void add(const FamilyPlan& plan) {
    family_ = static_cast<int>(cohort_.families.size());
    cohort_.families.push_back(Family{"", plan.structure});
    village_ = plan.village;
    switch (plan.structure) {
      case FamilyStructure::nuclear: {
        const int father = add_founder(false, FamilyRole::father);
        const int mother = add_founder(true, FamilyRole::mother);
        const int youngest_parent = std::min(cohort_.people[father].age, cohort_.people[mother].age);
        add_children(father, mother, plan.first_children, youngest_parent - 20);
        break;
      }
      case FamilyStructure::sibship: {
        const int father = add_founder(false, FamilyRole::ancestor);
        const int mother = add_founder(true, FamilyRole::ancestor);
        add_children(father, mother, plan.first_children, kOldestChild);
        break;
      }
      case FamilyStructure::half_sibship: {
        const int mother = add_founder(true, FamilyRole::ancestor);
        const int first_father = add_founder(false, FamilyRole::ancestor);
        const int second_father = add_founder(false, FamilyRole::ancestor);
        add_children(first_father, mother, plan.first_children, kOldestChild);
        add_children(second_father, mother, plan.second_children, kOldestChild);
        break;
      }
      case FamilyStructure::cousins: {
        const int grandfather = add_founder(false, FamilyRole::ancestor);
        const int grandmother = add_founder(true, FamilyRole::ancestor);
        const int sons_wife = add_founder(true, FamilyRole::ancestor);
        const int daughters_husband = add_founder(false, FamilyRole::ancestor);
        const int son = add_person(child_of(grandfather, grandmother, false));
        const int daughter = add_person(child_of(grandfather, grandmother, true));
        add_children(son, sons_wife, plan.first_children, kOldestChild);
        add_children(daughters_husband, daughter, plan.second_children, kOldestChild);
        break;
      }
    }
  }

 private:
  static constexpr int kOldestChild = 67;  // adult children whose parents' ages are not recorded

  int add_person(Person person) {
    cohort_.people.push_back(std::move(person));
    return static_cast<int>(cohort_.people.size() - 1);
  }

  // Genotyped members get an age, covariates and a questionnaire; ancestors need none.
  void enrol(Person& person, FamilyRole role, int age) {
    person.genotyped = true;
    person.role = role;
    person.age = age;
    draw_pcs(person, random_);
    person.in_table = !random_.bernoulli(0.01);
  }

  int add_founder(bool female, FamilyRole role) {
    Person person;
    person.family = family_;
    person.female = female;
    person.village = village_;
    person.ancestry = draw_ancestry(village_, random_);
    person.genotyped = false;
    person.role = FamilyRole::ancestor;
    if (role != FamilyRole::ancestor) enrol(person, role, 45 + static_cast<int>(random_.index(40)));
    return add_person(std::move(person));
  }

  Person child_of(int father, int mother, bool female) const {
    Person child;
    child.family = family_;
    child.father = father;
    child.mother = mother;
    child.female = female;
    child.village = cohort_.people[mother].village;
    child.ancestry = 0.5 * (cohort_.people[father].ancestry + cohort_.people[mother].ancestry);
    child.genotyped = false;
    child.role = FamilyRole::ancestor;
    return child;
  }

  void add_children(int father, int mother, int count, int oldest) {
    for (int child_idx = 0; child_idx < count; ++child_idx) {
      Person child = child_of(father, mother, random_.bernoulli(0.5));
      enrol(child, FamilyRole::child, 18 + static_cast<int>(random_.index(static_cast<std::size_t>(oldest - 17))));
      add_person(std::move(child));
    }
  }

  Cohort& cohort_;
  Random& random_;
  int family_ = -1;
  int village_ = 0;
};

// Families and unrelated samples in a random order, so that a family's members
// sit next to each other in the files but families are spread through them.
void add_families_and_unrelated(const SimulationOptions& options, Cohort& cohort, Random& random) {
  Random family_random(stream_seed(options.seed, kFamilyStream));
  const int members_wanted = static_cast<int>(std::lround(options.family_share * options.samples));
  const std::vector<FamilyPlan> plans = plan_families(members_wanted, family_random);
  int placed = 0;
  for (const FamilyPlan& plan : plans) placed += genotyped_members(plan);
  std::vector<int> units(plans.size() + static_cast<std::size_t>(options.samples - placed), -1);
  for (std::size_t plan_idx = 0; plan_idx < plans.size(); ++plan_idx) units[plan_idx] = static_cast<int>(plan_idx);
  for (std::size_t unit_idx = units.size(); unit_idx > 1; --unit_idx) {
    std::swap(units[unit_idx - 1], units[family_random.index(unit_idx)]);
  }
  FamilyBuilder builder(cohort, random);
  for (int unit : units) {
    if (unit < 0) {
      cohort.people.push_back(draw_unrelated_person(random));
    } else {
      builder.add(plans[static_cast<std::size_t>(unit)]);
    }
  }
}

// Invented identifiers of the Saltmarsh Ridge scenario: SR00001 for samples,
// saltmarsh_a00001 for ancestors who were not genotyped, saltmarsh_f0001 for families.
void name_people(Cohort& cohort) {
  char id[40];
  std::size_t ancestors = 0;
  for (std::size_t person_idx = 0; person_idx < cohort.people.size(); ++person_idx) {
    Person& person = cohort.people[person_idx];
    if (person.genotyped) {
      cohort.samples.push_back(person_idx);
      std::snprintf(id, sizeof id, "SR%05zu", cohort.samples.size());
    } else {
      std::snprintf(id, sizeof id, "saltmarsh_a%05zu", ++ancestors);
    }
    person.id = id;
  }
  for (std::size_t family_idx = 0; family_idx < cohort.families.size(); ++family_idx) {
    std::snprintf(id, sizeof id, "saltmarsh_f%04zu", family_idx + 1);
    cohort.families[family_idx].id = id;
  }
}

const char* role_name(FamilyRole role) {
  switch (role) {
    case FamilyRole::unrelated: return "unrelated";
    case FamilyRole::father: return "father";
    case FamilyRole::mother: return "mother";
    case FamilyRole::child: return "child";
    case FamilyRole::ancestor: return "ancestor";
  }
  return "";
}

const char* structure_name(FamilyStructure structure) {
  switch (structure) {
    case FamilyStructure::nuclear: return "nuclear";
    case FamilyStructure::sibship: return "sibship";
    case FamilyStructure::half_sibship: return "half_sibship";
    case FamilyStructure::cousins: return "cousins";
  }
  return "";
}

}  // namespace

Cohort make_cohort(const SimulationOptions& options, Random& random) {
  Cohort cohort;
  if (options.family_share > 0.0) {
    add_families_and_unrelated(options, cohort, random);
  } else {
    for (int sample_idx = 0; sample_idx < options.samples; ++sample_idx) {
      cohort.people.push_back(draw_unrelated_person(random));
    }
  }
  name_people(cohort);
  return cohort;
}

void write_families(const Cohort& cohort, const std::string& path) {
  PlainTextFile file(path);
  file.write("family\tparticipant\tfather\tmother\trole\tstructure\n");
  auto id_of = [&cohort](int person_idx) {
    return person_idx < 0 ? std::string("NA") : cohort.people[static_cast<std::size_t>(person_idx)].id;
  };
  for (const Person& person : cohort.people) {
    const bool in_family = person.family >= 0;
    const Family* family = in_family ? &cohort.families[static_cast<std::size_t>(person.family)] : nullptr;
    file.write((family ? family->id : std::string("NA")) + "\t" + person.id + "\t" + id_of(person.father) + "\t" +
               id_of(person.mother) + "\t" + role_name(person.role) + "\t" +
               (family ? structure_name(family->structure) : "NA") + "\n");
  }
  file.commit();
}

}  // namespace tamis::simulation
