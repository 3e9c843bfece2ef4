// The regional plot of one lead locus: -log10 p against position in the
// locus window, every variant coloured on a continuous scale by its LD r^2
// with the lead, the lead named, and (from `tamis signals`) the other
// signals' leads and the credible-set members marked.
#pragma once

#include <cstddef>
#include <string>

#include "report/locus_ld.hpp"
#include "report/plot_canvas.hpp"
#include "report/signal_marks.hpp"

namespace tamis::report {

// The report's LD scale: pale grey at r^2 = 0 through gold, amber and brick
// to a deep wine at 1, interpolated linearly between its stops; lightness
// falls all the way, so the order reads in grey print too. NaN is grey.
Rgb ld_colour(double r_squared);

struct RegionalLayout {
  int width = 1200, height = 660;
  PlotFrame frame{92, 70, 1010, 576};
  double headroom = 44;  // device units kept free above the highest point for the lead's name
  std::int64_t first = 0, last = 1;
  double y_max = 1;
  double x_of(std::int64_t position) const;
  double y_of(double neg_log_10_p) const;
};

RegionalLayout lay_out_regional(const LocusWindow& window);

struct RegionalFacts {
  std::string trait;
  std::size_t analysis_samples = 0;
  const SignalMarks* marks = nullptr;  // null: no signals files for the trait
};

// Draws the plot into PNG_PATH and SVG_PATH; returns the number of points drawn.
std::size_t render_regional(const LocusWindow& window, const RegionalFacts& facts, const std::string& png_path,
                            const std::string& svg_path);

}  // namespace tamis::report
