#include "report/regional_plot.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>
#include <functional>

#include "report/html_page.hpp"
#include "report/manhattan_plot.hpp"

namespace tamis::report {

namespace {

constexpr double dot_radius = 4.2;
constexpr double lead_radius = 7.0;
constexpr double tick_font = 14.0;
constexpr double caption_font = 16.0;
constexpr double legend_font = 13.0;

struct ScaleStop {
  double r_squared;
  Rgb colour;
};

// Chosen for this report; see ld_colour.
constexpr std::array<ScaleStop, 5> ld_scale = {{{0.00, {0.835, 0.839, 0.851}},
                                                {0.20, {0.949, 0.812, 0.478}},
                                                {0.45, {0.914, 0.565, 0.227}},
                                                {0.70, {0.749, 0.259, 0.192}},
                                                {1.00, {0.404, 0.071, 0.188}}}};
constexpr Rgb unmeasured_grey{0.62, 0.62, 0.64};

// The colour bar and legend sit right of the panel.
constexpr double bar_left = 1046, bar_width = 20, bar_top = 96, bar_bottom = 336;

std::string format_position_tick(double megabases, double step) {
  const int decimals = std::clamp(static_cast<int>(std::ceil(-std::log10(step) - 1e-9)), 0, 6);
  char text[32];
  std::snprintf(text, sizeof text, "%.*f", decimals, megabases);
  return text;
}

void draw_y_axis(cairo_t* cairo, const RegionalLayout& layout) {
  const PlotFrame& frame = layout.frame;
  select_font(cairo, tick_font);
  cairo_set_line_width(cairo, 1.0);
  const std::vector<double> ticks = choose_ticks(layout.y_max, 6);
  const double step = ticks.size() > 1 ? ticks[1] : 1.0;
  for (double tick : ticks) {
    const double y = std::round(layout.y_of(tick)) + 0.5;
    if (y < frame.top) break;
    set_colour(cairo, colours::grid);
    cairo_move_to(cairo, frame.left, y);
    cairo_line_to(cairo, frame.right, y);
    cairo_stroke(cairo);
    set_colour(cairo, colours::ink);
    draw_text(cairo, format_tick(tick, step), frame.left - 10, y + tick_font * 0.35, Anchor::right);
  }
  cairo_save(cairo);
  cairo_translate(cairo, frame.left - 50, (frame.top + frame.bottom) / 2);
  cairo_rotate(cairo, -M_PI / 2);
  draw_log10_p_caption(cairo, "", "", 0, 0, caption_font);
  cairo_restore(cairo);
}

void draw_x_axis(cairo_t* cairo, const RegionalLayout& layout, const std::string& chromosome) {
  const PlotFrame& frame = layout.frame;
  const double span_mb = static_cast<double>(layout.last - layout.first) / 1e6;
  const std::vector<double> spacing = choose_ticks(span_mb, 7);
  const double step = spacing.size() > 1 ? spacing[1] : std::max(span_mb, 1e-6);
  const double first_mb = static_cast<double>(layout.first) / 1e6;
  select_font(cairo, tick_font);
  cairo_set_line_width(cairo, 1.0);
  for (double tick = std::ceil(first_mb / step - 1e-9) * step; tick <= first_mb + span_mb + 1e-9; tick += step) {
    const double x = std::round(layout.x_of(static_cast<std::int64_t>(std::llround(tick * 1e6)))) + 0.5;
    set_colour(cairo, colours::grid);
    cairo_move_to(cairo, x, frame.top);
    cairo_line_to(cairo, x, frame.bottom);
    cairo_stroke(cairo);
    set_colour(cairo, colours::ink);
    cairo_move_to(cairo, x, frame.bottom);
    cairo_line_to(cairo, x, frame.bottom + 6);
    cairo_stroke(cairo);
    draw_text(cairo, format_position_tick(tick, step), x, frame.bottom + 24, Anchor::centre);
  }
  select_font(cairo, caption_font);
  draw_text(cairo, "position on chromosome " + chromosome_display_name(chromosome) + " (Mb)",
            (frame.left + frame.right) / 2, frame.bottom + 56, Anchor::centre);
}

void draw_genome_wide_line(cairo_t* cairo, const RegionalLayout& layout) {
  if (genome_wide_neg_log_10_p > layout.y_max) return;
  const double y = std::round(layout.y_of(genome_wide_neg_log_10_p)) + 0.5;
  const double dashes[] = {6.0, 4.0};
  cairo_save(cairo);
  cairo_set_dash(cairo, dashes, 2, 0);
  set_colour(cairo, colours::slate);
  cairo_set_line_width(cairo, 1.2);
  cairo_move_to(cairo, layout.frame.left, y);
  cairo_line_to(cairo, layout.frame.right, y);
  cairo_stroke(cairo);
  cairo_restore(cairo);
  select_font(cairo, 12.0);
  set_colour(cairo, colours::slate);
  draw_text(cairo, "5e-8", layout.frame.right - 6, y - 5, Anchor::right);
}

void fill_dot(cairo_t* cairo, double x, double y, double radius, Rgb colour) {
  cairo_new_sub_path(cairo);
  cairo_arc(cairo, x, y, radius, 0, 2 * M_PI);
  set_colour(cairo, colour);
  cairo_fill_preserve(cairo);
  // A thin dark rim keeps pale dots visible on the white panel.
  cairo_set_source_rgba(cairo, colours::ink.red, colours::ink.green, colours::ink.blue, 0.35);
  cairo_set_line_width(cairo, 0.6);
  cairo_stroke(cairo);
}

void ring(cairo_t* cairo, double x, double y, double radius, Rgb colour, double width) {
  cairo_new_sub_path(cairo);
  cairo_arc(cairo, x, y, radius, 0, 2 * M_PI);
  set_colour(cairo, colour);
  cairo_set_line_width(cairo, width);
  cairo_stroke(cairo);
}

void hollow_dot(cairo_t* cairo, double x, double y) { ring(cairo, x, y, dot_radius - 0.6, unmeasured_grey, 1.2); }

void square(cairo_t* cairo, double x, double y, double half, Rgb colour) {
  cairo_rectangle(cairo, x - half, y - half, 2 * half, 2 * half);
  set_colour(cairo, colour);
  cairo_set_line_width(cairo, 2.0);
  cairo_stroke(cairo);
}

// Variants drawn low r^2 first, so that the lead's neighbours in LD stay on top.
std::vector<std::size_t> drawing_order(const LocusWindow& window) {
  std::vector<std::size_t> order;
  for (std::size_t variant_idx = 0; variant_idx < window.variants.size(); ++variant_idx) {
    if (!std::isnan(window.variants[variant_idx].neg_log_10_p)) order.push_back(variant_idx);
  }
  auto rank = [&](std::size_t variant_idx) {
    const double r_squared = window.variants[variant_idx].r_squared;
    return std::isnan(r_squared) ? -1.0 : r_squared;
  };
  std::stable_sort(order.begin(), order.end(),
                   [&](std::size_t left, std::size_t right) { return rank(left) < rank(right); });
  return order;
}

void draw_points(cairo_t* cairo, const LocusWindow& window, const RegionalLayout& layout,
                 const std::vector<std::size_t>& order) {
  for (std::size_t variant_idx : order) {
    if (variant_idx == window.lead_idx) continue;
    const WindowVariant& variant = window.variants[variant_idx];
    const double x = layout.x_of(variant.position), y = layout.y_of(variant.neg_log_10_p);
    if (std::isnan(variant.r_squared)) {
      hollow_dot(cairo, x, y);
    } else {
      fill_dot(cairo, x, y, dot_radius, ld_colour(variant.r_squared));
    }
  }
}

void draw_credible_rings(cairo_t* cairo, const LocusWindow& window, const RegionalLayout& layout,
                         const SignalMarks& marks) {
  const double dashes[] = {2.5, 2.0};
  for (const WindowVariant& variant : window.variants) {
    if (std::isnan(variant.neg_log_10_p)) continue;
    const bool in_95 = marks.in_95.count(variant.variant_id) > 0;
    if (!in_95 && !marks.in_99.count(variant.variant_id)) continue;
    cairo_save(cairo);
    if (!in_95) cairo_set_dash(cairo, dashes, 2, 0);
    // Outside the lead's own rings, which are drawn over this one.
    const double radius = variant.variant_id == window.lead_variant_id ? lead_radius + 8.0 : dot_radius + 3.2;
    ring(cairo, layout.x_of(variant.position), layout.y_of(variant.neg_log_10_p), radius, colours::teal, 1.6);
    cairo_restore(cairo);
  }
}

// A name above its point with a pale backing, kept inside the panel.
void draw_point_label(cairo_t* cairo, const std::string& text, double x, double y, const RegionalLayout& layout,
                      double size, bool bold, Rgb colour) {
  select_font(cairo, size, bold);
  const double width = text_width(cairo, text);
  const double centre = std::clamp(x, layout.frame.left + width / 2 + 4, layout.frame.right - width / 2 - 4);
  const double baseline = std::max(y - 14, layout.frame.top + size + 2);
  cairo_set_source_rgba(cairo, colours::panel.red, colours::panel.green, colours::panel.blue, 0.85);
  cairo_rectangle(cairo, centre - width / 2 - 3, baseline - size, width + 6, size + 5);
  cairo_fill(cairo);
  set_colour(cairo, colour);
  draw_text(cairo, text, centre, baseline, Anchor::centre);
}

void draw_signal_leads(cairo_t* cairo, const LocusWindow& window, const RegionalLayout& layout,
                       const SignalMarks& marks) {
  for (const SignalLead& lead : marks.leads) {
    if (lead.variant_id == window.lead_variant_id || lead.chromosome != window.chromosome) continue;
    auto variant = std::find_if(window.variants.begin(), window.variants.end(),
                                [&](const WindowVariant& candidate) { return candidate.variant_id == lead.variant_id; });
    if (variant == window.variants.end() || std::isnan(variant->neg_log_10_p)) continue;
    const double x = layout.x_of(variant->position), y = layout.y_of(variant->neg_log_10_p);
    square(cairo, x, y, dot_radius + 3.0, colours::teal);
    draw_point_label(cairo, lead.variant_id, x, y - 2, layout, 12.0, false, colours::teal);
  }
}

void draw_lead(cairo_t* cairo, const LocusWindow& window, const RegionalLayout& layout) {
  const WindowVariant& lead = window.variants[window.lead_idx];
  const double x = layout.x_of(lead.position), y = layout.y_of(lead.neg_log_10_p);
  fill_dot(cairo, x, y, lead_radius, ld_colour(1.0));
  ring(cairo, x, y, lead_radius + 2.5, colours::panel, 2.0);
  ring(cairo, x, y, lead_radius + 4.5, colours::ink, 1.8);
  draw_point_label(cairo, window.lead_name, x, y - 6, layout, 14.0, true, colours::ink);
}

void draw_colour_bar(cairo_t* cairo) {
  cairo_pattern_t* gradient = cairo_pattern_create_linear(0, bar_bottom, 0, bar_top);
  for (const ScaleStop& stop : ld_scale) {
    cairo_pattern_add_color_stop_rgb(gradient, stop.r_squared, stop.colour.red, stop.colour.green, stop.colour.blue);
  }
  cairo_rectangle(cairo, bar_left, bar_top, bar_width, bar_bottom - bar_top);
  cairo_set_source(cairo, gradient);
  cairo_fill(cairo);
  cairo_pattern_destroy(gradient);
  set_colour(cairo, colours::ink);
  cairo_set_line_width(cairo, 1.0);
  cairo_rectangle(cairo, bar_left + 0.5, bar_top + 0.5, bar_width - 1, bar_bottom - bar_top - 1);
  cairo_stroke(cairo);
  select_font(cairo, tick_font);
  for (int tick_idx = 0; tick_idx <= 5; ++tick_idx) {
    const double value = tick_idx * 0.2;
    const double y = std::round(bar_bottom - value * (bar_bottom - bar_top)) + 0.5;
    cairo_move_to(cairo, bar_left + bar_width, y);
    cairo_line_to(cairo, bar_left + bar_width + 5, y);
    cairo_stroke(cairo);
    char text[8];
    std::snprintf(text, sizeof text, "%.1f", value);
    draw_text(cairo, text, bar_left + bar_width + 9, y + tick_font * 0.35, Anchor::left);
  }
  select_font(cairo, caption_font, true);
  draw_text(cairo, "LD r\u00b2", bar_left - 4, bar_top - 26, Anchor::left);
  select_font(cairo, 12.0);
  set_colour(cairo, colours::quiet_ink);
  draw_text(cairo, "with the lead", bar_left - 4, bar_top - 11, Anchor::left);
}

// The symbols' meanings under the colour bar, those that apply to this plot.
void draw_legend(cairo_t* cairo, const LocusWindow& window, const RegionalFacts& facts) {
  const double symbol_x = bar_left + 8, text_x = bar_left + 26;
  double y = bar_bottom + 46;
  auto entry = [&](const std::string& text, const std::function<void(double)>& symbol) {
    symbol(y);
    select_font(cairo, legend_font);
    set_colour(cairo, colours::ink);
    draw_text(cairo, text, text_x, y + legend_font * 0.35, Anchor::left);
    y += 28;
  };
  entry("lead", [&](double at) {
    fill_dot(cairo, symbol_x, at, 5.0, ld_colour(1.0));
    ring(cairo, symbol_x, at, 8.0, colours::ink, 1.6);
  });
  if (facts.marks && !facts.marks->leads.empty()) {
    entry("another signal", [&](double at) { square(cairo, symbol_x, at, 7.0, colours::teal); });
  }
  if (facts.marks && !facts.marks->credible_path.empty()) {
    entry("95% credible set", [&](double at) { ring(cairo, symbol_x, at, 7.5, colours::teal, 1.6); });
    entry("99% set only", [&](double at) {
      const double dashes[] = {2.5, 2.0};
      cairo_save(cairo);
      cairo_set_dash(cairo, dashes, 2, 0);
      ring(cairo, symbol_x, at, 7.5, colours::teal, 1.6);
      cairo_restore(cairo);
    });
  }
  if (window.unmeasured > 0) {
    entry("r\u00b2 unknown", [&](double at) { hollow_dot(cairo, symbol_x, at); });
  }
}

void draw_title(cairo_t* cairo, const LocusWindow& window, const RegionalFacts& facts, const RegionalLayout& layout) {
  set_colour(cairo, colours::ink);
  select_font(cairo, 21.0, true);
  const std::string title = facts.trait + "  \u00b7  locus " + std::to_string(window.rank) + ", lead " + window.lead_name;
  draw_text(cairo, title, layout.frame.left, 36, Anchor::left);
  select_font(cairo, 13.5);
  set_colour(cairo, colours::quiet_ink);
  const std::string facts_text =
      chromosome_display_name(window.chromosome) + ":" + std::to_string(window.lead_position) + "   \u00b7   p = " +
      window.lead_p_text + "   \u00b7   " + format_count(window.variants.size()) + " variants   \u00b7   r\u00b2 on " +
      format_count(facts.analysis_samples) + " analysis samples, missing dosages mean-imputed";
  draw_text(cairo, facts_text, layout.frame.left, 58, Anchor::left);
}

}  // namespace

Rgb ld_colour(double r_squared) {
  if (std::isnan(r_squared)) return unmeasured_grey;
  const double value = std::clamp(r_squared, 0.0, 1.0);
  std::size_t upper = 1;
  while (upper + 1 < ld_scale.size() && ld_scale[upper].r_squared < value) ++upper;
  const ScaleStop& low = ld_scale[upper - 1];
  const ScaleStop& high = ld_scale[upper];
  const double share = (value - low.r_squared) / (high.r_squared - low.r_squared);
  auto mix = [share](double from, double to) { return from + share * (to - from); };
  return Rgb{mix(low.colour.red, high.colour.red), mix(low.colour.green, high.colour.green),
             mix(low.colour.blue, high.colour.blue)};
}

double RegionalLayout::x_of(std::int64_t position) const {
  const double inset = 10.0;  // the outermost dots stay whole inside the panel
  const double share = static_cast<double>(position - first) / static_cast<double>(std::max<std::int64_t>(1, last - first));
  return frame.left + inset + share * (frame.width() - 2 * inset);
}

double RegionalLayout::y_of(double neg_log_10_p) const {
  return frame.bottom - 6 - std::max(0.0, neg_log_10_p) / y_max * (frame.height() - 6 - headroom);
}

RegionalLayout lay_out_regional(const LocusWindow& window) {
  RegionalLayout layout;
  layout.first = window.first;
  layout.last = std::max(window.last, window.first + 1);
  double highest = 1.0;
  for (const WindowVariant& variant : window.variants) {
    if (!std::isnan(variant.neg_log_10_p)) highest = std::max(highest, static_cast<double>(variant.neg_log_10_p));
  }
  layout.y_max = highest * 1.04;
  return layout;
}

std::size_t render_regional(const LocusWindow& window, const RegionalFacts& facts, const std::string& png_path,
                            const std::string& svg_path) {
  const RegionalLayout layout = lay_out_regional(window);
  const std::vector<std::size_t> order = drawing_order(window);
  render_png_and_svg(png_path, svg_path, layout.width, layout.height, [&](cairo_t* cairo) {
    const PlotFrame& frame = layout.frame;
    paint_paper_and_panel(cairo, frame);
    draw_y_axis(cairo, layout);
    draw_x_axis(cairo, layout, window.chromosome);
    draw_genome_wide_line(cairo, layout);
    cairo_save(cairo);
    cairo_rectangle(cairo, frame.left, frame.top, frame.width(), frame.height());
    cairo_clip(cairo);
    draw_points(cairo, window, layout, order);
    if (facts.marks) draw_credible_rings(cairo, window, layout, *facts.marks);
    if (facts.marks) draw_signal_leads(cairo, window, layout, *facts.marks);
    draw_lead(cairo, window, layout);
    cairo_restore(cairo);
    set_colour(cairo, colours::ink);
    cairo_set_line_width(cairo, 1.2);
    cairo_rectangle(cairo, frame.left, frame.top, frame.width(), frame.height());
    cairo_stroke(cairo);
    draw_colour_bar(cairo);
    draw_legend(cairo, window, facts);
    draw_title(cairo, window, facts, layout);
  });
  return order.size();
}

}  // namespace tamis::report
