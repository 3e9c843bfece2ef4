// The Manhattan plot: -log10 p along the genome, chromosomes in alternating
// shades, the genome-wide (5e-8) and suggestive (1e-5) lines, lead loci named.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "report/lead_loci.hpp"
#include "report/plot_canvas.hpp"
#include "report/trait_results.hpp"

namespace tamis::report {

constexpr double suggestive_neg_log_10_p = 5.0;       // p = 1e-5, common practice
constexpr double genome_wide_neg_log_10_p = 7.30103;  // p = 5e-8, common practice
constexpr double thinning_cell = 2.0;

struct ChromosomeStrip {
  std::string label;  // X, Y, MT for codes 23-25
  std::int64_t first_position = 0, last_position = 0;
  double x_start = 0, x_end = 0;  // device units
};

struct ManhattanLayout {
  int width = 1800, height = 720;
  PlotFrame frame;
  double y_max = 10;          // -log10 p at the top of the panel (below the label headroom)
  double label_headroom = 34; // device units kept free above y_max for lead labels
  std::vector<ChromosomeStrip> strips;

  double x_of(std::uint32_t chromosome, std::int64_t position) const;
  double y_of(double neg_log_10_p) const;
};

// The panel reaches at least one unit above `highest_line` (-log10 p).
ManhattanLayout lay_out_manhattan(const TraitResults& results, double highest_line = genome_wide_neg_log_10_p);

// Every variant at or above the suggestive line, and below it one variant per
// occupied cell (of thinning_cell device units) and shade: points closer
// than a dot's radius cannot be told apart in the picture.
std::vector<PlotPoint> thin_manhattan_points(const TraitResults& results, const ManhattanLayout& layout);

// A horizontal significance line; the primary one is drawn solid and red.
struct SignificanceLine {
  double neg_log_10_p = 0;
  std::string text;  // written at its right end
  bool primary = false;
};

// What the plot says besides its points. The defaults describe a variant
// scan; the set-level plot names its own unit, inflation and line.
struct ManhattanFacts {
  double lambda_gc = 0;
  std::size_t label_limit = 20;
  std::string count_noun = "variants";
  std::string lambda_label = "genomic control \u03bb";
  std::string lead_noun_one = "lead locus", lead_noun_many = "lead loci";
  std::vector<SignificanceLine> lines = {{suggestive_neg_log_10_p, "1e-5", false},
                                           {genome_wide_neg_log_10_p, "5e-8", true}};
};

// Draws the plot; returns the number of points drawn.
std::size_t render_manhattan(const TraitResults& results, const std::vector<LeadLocus>& leads,
                             const ManhattanFacts& facts, const std::string& png_path, const std::string& svg_path);

}  // namespace tamis::report
