// The QQ plot: observed against expected -log10 p, with the 95% band of
// uniform order statistics and the genomic control lambda.
#pragma once

#include <string>
#include <vector>

#include "report/plot_canvas.hpp"
#include "report/trait_results.hpp"

namespace tamis::report {

struct QqBandPoint {
  double expected = 0;  // -log10(i / (n + 1))
  double low = 0;       // -log10 of Beta(i, n - i + 1)'s 97.5% quantile
  double high = 0;      // -log10 of its 2.5% quantile
};

// The band at about `wanted` ranks spread evenly along the expected axis.
std::vector<QqBandPoint> compute_qq_band(std::size_t n, int wanted);

// -log10 p of every variant that has one, largest first.
std::vector<float> sorted_neg_log_10_p(const TraitResults& results);

// The plot's notes under lambda: how it was computed and what was counted.
// The defaults describe a variant scan.
struct QqFacts {
  double lambda_gc = 0;
  std::string lambda_note = "genomic control, median score \u03c7\u00b2 / 0.4549";
  std::string count_noun = "variants";
};

// Draws the plot; returns the number of points drawn.
std::size_t render_qq(const TraitResults& results, const QqFacts& facts, const std::string& png_path,
                      const std::string& svg_path);

}  // namespace tamis::report
