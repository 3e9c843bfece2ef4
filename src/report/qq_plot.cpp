#include "report/qq_plot.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <functional>

#include "report/manhattan_plot.hpp"
#include "report/order_statistics.hpp"

namespace tamis::report {

namespace {

constexpr int plot_size = 760;
constexpr double dot_radius = 2.4;
constexpr double tick_font = 14.0;
constexpr double caption_font = 17.0;
constexpr int band_ranks = 240;

struct QqLayout {
  PlotFrame frame{88, 58, plot_size - 28.0, plot_size - 80.0};
  double x_max = 1, y_max = 1;
  double x_of(double expected) const { return frame.left + expected / x_max * frame.width(); }
  double y_of(double observed) const { return frame.bottom - observed / y_max * frame.height(); }
};

double expected_at_rank(std::size_t rank, std::size_t n) {
  return -std::log10(static_cast<double>(rank) / static_cast<double>(n + 1));
}

// Consecutive sorted points that land in the same device cell are drawn
// once; everything at or above the suggestive line is kept.
std::vector<PlotPoint> thin_qq_points(const std::vector<float>& observed, const QqLayout& layout) {
  std::vector<PlotPoint> points;
  long last_column = -1, last_row = -1;
  for (std::size_t rank_idx = 0; rank_idx < observed.size(); ++rank_idx) {
    PlotPoint point;
    point.x = static_cast<float>(layout.x_of(expected_at_rank(rank_idx + 1, observed.size())));
    point.y = static_cast<float>(layout.y_of(observed[rank_idx]));
    const long column = std::lround(point.x), row = std::lround(point.y);
    if (observed[rank_idx] < suggestive_neg_log_10_p && column == last_column && row == last_row) continue;
    last_column = column;
    last_row = row;
    points.push_back(point);
  }
  return points;
}

void draw_axes(cairo_t* cairo, const QqLayout& layout) {
  const PlotFrame& frame = layout.frame;
  select_font(cairo, tick_font);
  cairo_set_line_width(cairo, 1.0);
  const std::vector<double> y_ticks = choose_ticks(layout.y_max, 6);
  for (double tick : y_ticks) {
    const double y = std::round(layout.y_of(tick)) + 0.5;
    set_colour(cairo, colours::grid);
    cairo_move_to(cairo, frame.left, y);
    cairo_line_to(cairo, frame.right, y);
    cairo_stroke(cairo);
    set_colour(cairo, colours::ink);
    draw_text(cairo, format_tick(tick, y_ticks.size() > 1 ? y_ticks[1] : 1), frame.left - 10,
              y + tick_font * 0.35, Anchor::right);
  }
  const std::vector<double> x_ticks = choose_ticks(layout.x_max, 6);
  for (double tick : x_ticks) {
    const double x = std::round(layout.x_of(tick)) + 0.5;
    set_colour(cairo, colours::grid);
    cairo_move_to(cairo, x, frame.top);
    cairo_line_to(cairo, x, frame.bottom);
    cairo_stroke(cairo);
    set_colour(cairo, colours::ink);
    draw_text(cairo, format_tick(tick, x_ticks.size() > 1 ? x_ticks[1] : 1), x, frame.bottom + 22, Anchor::centre);
  }
  set_colour(cairo, colours::ink);
  draw_log10_p_caption(cairo, "expected ", "", (frame.left + frame.right) / 2, frame.bottom + 56, caption_font);
  cairo_save(cairo);
  cairo_translate(cairo, frame.left - 52, (frame.top + frame.bottom) / 2);
  cairo_rotate(cairo, -M_PI / 2);
  draw_log10_p_caption(cairo, "observed ", "", 0, 0, caption_font);
  cairo_restore(cairo);
}

void draw_band(cairo_t* cairo, const QqLayout& layout, const std::vector<QqBandPoint>& band) {
  if (band.empty()) return;
  cairo_new_path(cairo);
  for (const QqBandPoint& point : band) cairo_line_to(cairo, layout.x_of(point.expected), layout.y_of(point.high));
  for (auto point = band.rbegin(); point != band.rend(); ++point) {
    cairo_line_to(cairo, layout.x_of(point->expected), layout.y_of(point->low));
  }
  cairo_close_path(cairo);
  set_colour(cairo, colours::mist);
  cairo_fill(cairo);
}

void draw_diagonal(cairo_t* cairo, const QqLayout& layout) {
  const double end = std::min(layout.x_max, layout.y_max);
  set_colour(cairo, colours::copper);
  cairo_set_line_width(cairo, 1.4);
  cairo_move_to(cairo, layout.x_of(0), layout.y_of(0));
  cairo_line_to(cairo, layout.x_of(end), layout.y_of(end));
  cairo_stroke(cairo);
}

void draw_annotations(cairo_t* cairo, const QqLayout& layout, const std::string& trait, std::size_t n,
                      const QqFacts& facts) {
  set_colour(cairo, colours::ink);
  select_font(cairo, 20.0, true);
  draw_text(cairo, trait, layout.frame.left, 36, Anchor::left);

  const std::string lambda_text = "\u03bb = " + format_lambda(facts.lambda_gc);
  const double x = layout.frame.left + 16;
  select_font(cairo, 18.0, true);
  draw_text(cairo, lambda_text, x, layout.frame.top + 30, Anchor::left);
  select_font(cairo, 13.0);
  set_colour(cairo, colours::quiet_ink);
  draw_text(cairo, facts.lambda_note, x, layout.frame.top + 50, Anchor::left);
  draw_text(cairo, format_count(n) + " " + facts.count_noun + "; band: 95% for uniform p", x, layout.frame.top + 68,
            Anchor::left);
}

}  // namespace

std::vector<QqBandPoint> compute_qq_band(std::size_t n, int wanted) {
  std::vector<QqBandPoint> band;
  if (n == 0) return band;
  const double top = expected_at_rank(1, n);
  std::size_t previous_rank = 0;
  for (int level = wanted; level >= 0; --level) {
    const double target = top * level / wanted;
    const double exact_rank = static_cast<double>(n + 1) * std::pow(10.0, -target);
    const std::size_t rank = std::clamp<std::size_t>(static_cast<std::size_t>(std::llround(exact_rank)), 1, n);
    if (rank == previous_rank) continue;
    previous_rank = rank;
    const double a = static_cast<double>(rank), b = static_cast<double>(n - rank + 1);
    QqBandPoint point;
    point.expected = expected_at_rank(rank, n);
    point.high = -std::log10(beta_quantile(0.025, a, b));
    point.low = -std::log10(beta_quantile(0.975, a, b));
    band.push_back(point);
  }
  return band;
}

std::vector<float> sorted_neg_log_10_p(const TraitResults& results) {
  std::vector<float> observed;
  observed.reserve(results.n_rows);
  for (float value : results.neg_log_10_p_of) {
    if (!std::isnan(value)) observed.push_back(std::max(0.0f, value));
  }
  std::sort(observed.begin(), observed.end(), std::greater<float>());
  return observed;
}

std::size_t render_qq(const TraitResults& results, const QqFacts& facts, const std::string& png_path,
                      const std::string& svg_path) {
  const std::vector<float> observed = sorted_neg_log_10_p(results);
  const std::size_t n = observed.size();
  const std::vector<QqBandPoint> band = compute_qq_band(n, band_ranks);
  QqLayout layout;
  const double expected_top = n > 0 ? expected_at_rank(1, n) : 1.0;
  double band_top = 0;
  for (const QqBandPoint& point : band) band_top = std::max(band_top, point.high);
  layout.x_max = expected_top * 1.04;
  layout.y_max = std::max({n > 0 ? static_cast<double>(observed.front()) : 0.0, expected_top, band_top, 1.0}) * 1.05;
  const std::vector<PlotPoint> points = thin_qq_points(observed, layout);

  render_png_and_svg(png_path, svg_path, plot_size, plot_size, [&](cairo_t* cairo) {
    paint_paper_and_panel(cairo, layout.frame);
    draw_axes(cairo, layout);
    cairo_save(cairo);
    cairo_rectangle(cairo, layout.frame.left, layout.frame.top, layout.frame.width(), layout.frame.height());
    cairo_clip(cairo);
    draw_band(cairo, layout, band);
    draw_diagonal(cairo, layout);
    draw_dots(cairo, points, 0, colours::teal, dot_radius);
    cairo_restore(cairo);
    set_colour(cairo, colours::ink);
    cairo_set_line_width(cairo, 1.2);
    cairo_rectangle(cairo, layout.frame.left, layout.frame.top, layout.frame.width(), layout.frame.height());
    cairo_stroke(cairo);
    draw_annotations(cairo, layout, results.trait, n, facts);
  });
  return points.size();
}

}  // namespace tamis::report
