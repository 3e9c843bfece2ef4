#include "report/manhattan_plot.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace tamis::report {

namespace {

constexpr double dot_radius = 2.3;
constexpr double strip_gap = 6.0;
constexpr double narrowest_strip = 12.0;  // so MT or a short contig stays visible
constexpr double label_font = 13.0;
constexpr double tick_font = 14.0;
constexpr double caption_font = 17.0;

// Widths proportional to the span of positions, except that no strip is
// narrower than `narrowest`; repeated until no proportional strip falls under it.
std::vector<double> strip_widths(const std::vector<double>& lengths, double available, double narrowest) {
  const std::size_t count = lengths.size();
  std::vector<bool> pinned(count, false);
  std::vector<double> widths(count, narrowest);
  for (std::size_t round = 0; round <= count; ++round) {
    double free_length = 0;
    std::size_t pinned_count = 0;
    for (std::size_t strip_idx = 0; strip_idx < count; ++strip_idx) {
      if (pinned[strip_idx]) {
        ++pinned_count;
      } else {
        free_length += lengths[strip_idx];
      }
    }
    if (free_length <= 0) break;
    const double scale = std::max(0.0, available - narrowest * pinned_count) / free_length;
    bool pinned_more = false;
    for (std::size_t strip_idx = 0; strip_idx < count; ++strip_idx) {
      if (pinned[strip_idx]) continue;
      widths[strip_idx] = lengths[strip_idx] * scale;
      if (widths[strip_idx] < narrowest) {
        pinned[strip_idx] = true;
        widths[strip_idx] = narrowest;
        pinned_more = true;
      }
    }
    if (!pinned_more) break;
  }
  return widths;
}

void find_position_ranges(const TraitResults& results, std::vector<ChromosomeStrip>& strips) {
  std::vector<bool> seen(strips.size(), false);
  for (std::size_t variant_idx = 0; variant_idx < results.n_rows; ++variant_idx) {
    ChromosomeStrip& strip = strips[results.chromosome_of[variant_idx]];
    const std::int64_t position = results.position_of[variant_idx];
    if (!seen[results.chromosome_of[variant_idx]]) {
      seen[results.chromosome_of[variant_idx]] = true;
      strip.first_position = strip.last_position = position;
    }
    strip.first_position = std::min(strip.first_position, position);
    strip.last_position = std::max(strip.last_position, position);
  }
}

void draw_background(cairo_t* cairo, const ManhattanLayout& layout) {
  const PlotFrame& frame = layout.frame;
  paint_paper_and_panel(cairo, frame);
  set_colour(cairo, colours::band);
  for (std::size_t strip_idx = 1; strip_idx < layout.strips.size(); strip_idx += 2) {
    const ChromosomeStrip& strip = layout.strips[strip_idx];
    const bool last = strip_idx + 1 == layout.strips.size();
    const double left = (layout.strips[strip_idx - 1].x_end + strip.x_start) / 2;
    const double right = last ? frame.right : (strip.x_end + layout.strips[strip_idx + 1].x_start) / 2;
    cairo_rectangle(cairo, left, frame.top, right - left, frame.height());
  }
  cairo_fill(cairo);
}

void draw_y_axis(cairo_t* cairo, const ManhattanLayout& layout) {
  const PlotFrame& frame = layout.frame;
  const std::vector<double> ticks = choose_ticks(layout.y_max, 7);
  const double step = ticks.size() > 1 ? ticks[1] : 1.0;
  select_font(cairo, tick_font);
  for (double tick : ticks) {
    const double y = layout.y_of(tick);
    set_colour(cairo, colours::grid);
    cairo_set_line_width(cairo, 1.0);
    cairo_move_to(cairo, frame.left, std::round(y) + 0.5);
    cairo_line_to(cairo, frame.right, std::round(y) + 0.5);
    cairo_stroke(cairo);
    set_colour(cairo, colours::ink);
    cairo_move_to(cairo, frame.left - 6, std::round(y) + 0.5);
    cairo_line_to(cairo, frame.left, std::round(y) + 0.5);
    cairo_stroke(cairo);
    draw_text(cairo, format_tick(tick, step), frame.left - 10, y + tick_font * 0.35, Anchor::right);
  }
  cairo_save(cairo);
  cairo_translate(cairo, frame.left - 56, (frame.top + frame.bottom) / 2);
  cairo_rotate(cairo, -M_PI / 2);
  set_colour(cairo, colours::ink);
  draw_log10_p_caption(cairo, "", "", 0, 0, caption_font);
  cairo_restore(cairo);
}

void draw_x_axis(cairo_t* cairo, const ManhattanLayout& layout) {
  const PlotFrame& frame = layout.frame;
  select_font(cairo, tick_font);
  set_colour(cairo, colours::ink);
  // Labels that would collide go to a second row, and are left out if that
  // row is taken too (the strips stay; only the name is missing).
  std::vector<TextBox> row_ends(2, TextBox{-1e9, 0, -1e9, 0});
  for (const ChromosomeStrip& strip : layout.strips) {
    const double centre = (strip.x_start + strip.x_end) / 2;
    const double half = text_width(cairo, strip.label) / 2;
    for (std::size_t row = 0; row < row_ends.size(); ++row) {
      if (centre - half < row_ends[row].right + 4) continue;
      const double baseline = frame.bottom + 20 + row * 17.0;
      row_ends[row] = draw_text(cairo, strip.label, centre, baseline, Anchor::centre);
      break;
    }
  }
  select_font(cairo, caption_font);
  draw_text(cairo, "chromosome", (frame.left + frame.right) / 2, frame.bottom + 62, Anchor::centre);
}

// A horizontal significance line with its p-value written at the right end.
void draw_threshold(cairo_t* cairo, const ManhattanLayout& layout, double neg_log_10_p, const std::string& text,
                       Rgb colour, bool dashed) {
  const PlotFrame& frame = layout.frame;
  const double y = layout.y_of(neg_log_10_p);
  cairo_save(cairo);
  set_colour(cairo, colour);
  cairo_set_line_width(cairo, dashed ? 1.2 : 1.5);
  if (dashed) {
    const double pattern[] = {7.0, 5.0};
    cairo_set_dash(cairo, pattern, 2, 0);
  }
  cairo_move_to(cairo, frame.left, y);
  cairo_line_to(cairo, frame.right, y);
  cairo_stroke(cairo);
  cairo_restore(cairo);
  set_colour(cairo, colour);
  select_font(cairo, 12.0, true);
  draw_text(cairo, text, frame.right + 6, y + 4, Anchor::left);
}

std::string lead_name(const LeadCandidate& candidate) {
  return candidate.rsid.empty() || candidate.rsid == "#NA" ? candidate.variant_id : candidate.rsid;
}

struct LabelSpot {
  std::string text;
  double centre = 0, baseline = 0;
  double point_x = 0, point_y = 0;
  TextBox box;
  bool leader = false;  // drawn away from its point, so a line joins them
  double leader_end_x = 0;  // where the line meets the label's lower edge
};

struct Segment {
  double x0, y0, x1, y1;
};

bool segment_hits_box(const Segment& segment, const TextBox& box) {
  constexpr int samples = 24;
  for (int sample_idx = 0; sample_idx <= samples; ++sample_idx) {
    const double share = static_cast<double>(sample_idx) / samples;
    const double x = segment.x0 + share * (segment.x1 - segment.x0);
    const double y = segment.y0 + share * (segment.y1 - segment.y0);
    if (x > box.left - 1 && x < box.right + 1 && y > box.top - 1 && y < box.bottom + 1) return true;
  }
  return false;
}

TextBox ring_box(double x, double y) { return TextBox{x - 6.5, y - 6.5, x + 6.5, y + 6.5}; }

// What a new label must keep clear of: the panel's edges, the labels and
// leader lines already placed, and the rings of the other leads.
struct LabelObstacles {
  PlotFrame frame;
  std::vector<TextBox> rings;  // one per lead, in lead order
  std::vector<LabelSpot> spots;
  std::vector<Segment> leaders;

  bool admits(const LabelSpot& spot, const Segment& leader, std::size_t lead_idx) const {
    const TextBox& box = spot.box;
    if (box.left < frame.left + 2 || box.right > frame.right - 2 || box.top < frame.top + 2) return false;
    for (const LabelSpot& other : spots) {
      if (box.overlaps(other.box, 1.0)) return false;
      if (spot.leader && segment_hits_box(leader, other.box)) return false;
    }
    for (std::size_t ring_idx = 0; ring_idx < rings.size(); ++ring_idx) {
      if (ring_idx != lead_idx && box.overlaps(rings[ring_idx], 1.0)) return false;
    }
    return std::none_of(leaders.begin(), leaders.end(),
                        [&](const Segment& line) { return segment_hits_box(line, box); });
  }
};

// Tries spots above the lead: straight up first, then higher or to either
// side with a leader line. A label that finds no clear spot is left out (the
// loci table lists every lead).
std::vector<LabelSpot> place_lead_labels(cairo_t* cairo, const TraitResults& results,
                                         const std::vector<LeadLocus>& leads, const ManhattanLayout& layout,
                                         std::size_t label_limit) {
  select_font(cairo, label_font, true);
  cairo_font_extents_t font;
  cairo_font_extents(cairo, &font);
  const double line_height = font.ascent + 4;

  LabelObstacles obstacles;
  obstacles.frame = layout.frame;
  std::vector<double> xs, ys;
  for (const LeadLocus& lead : leads) {
    const std::size_t variant = results.candidates[lead.candidate_idx].variant_idx;
    xs.push_back(layout.x_of(results.chromosome_of[variant], results.position_of[variant]));
    ys.push_back(layout.y_of(results.neg_log_10_p_of[variant]));
    obstacles.rings.push_back(ring_box(xs.back(), ys.back()));
  }
  for (std::size_t lead_idx = 0; lead_idx < leads.size() && obstacles.spots.size() < label_limit; ++lead_idx) {
    const std::string name = lead_name(results.candidates[leads[lead_idx].candidate_idx]);
    const double width = text_width(cairo, name);
    const double x = xs[lead_idx], y = ys[lead_idx];
    bool placed = false;
    for (int level = 0; level < 6 && !placed; ++level) {
      for (double shift : {0.0, -0.6, 0.6, -0.9, 0.9, -1.2, 1.2}) {
        LabelSpot spot;
        spot.text = name;
        spot.centre = x + shift * (width + 10);
        spot.baseline = y - 11 - level * line_height;
        spot.point_x = x;
        spot.point_y = y;
        spot.box = TextBox{spot.centre - width / 2 - 2, spot.baseline - font.ascent, spot.centre + width / 2 + 2,
                           spot.baseline + 3};
        spot.leader = level > 0 || shift != 0.0;
        const Segment leader{x, y - 6, std::clamp(x, spot.box.left + 3, spot.box.right - 3), spot.box.bottom};
        if (!obstacles.admits(spot, leader, lead_idx)) continue;
        if (spot.leader) {
          obstacles.leaders.push_back(leader);
          spot.leader_end_x = leader.x1;
        }
        obstacles.spots.push_back(spot);
        placed = true;
        break;
      }
    }
  }
  return obstacles.spots;
}

void draw_lead_labels(cairo_t* cairo, const std::vector<LabelSpot>& spots) {
  set_colour(cairo, colours::plum);
  cairo_set_line_width(cairo, 0.9);
  for (const LabelSpot& spot : spots) {
    if (!spot.leader) continue;
    cairo_move_to(cairo, spot.point_x, spot.point_y - 6);
    cairo_line_to(cairo, spot.leader_end_x, spot.box.bottom);
  }
  cairo_stroke(cairo);
  select_font(cairo, label_font, true);
  for (const LabelSpot& spot : spots) {
    // A pale backing keeps the name legible over dots and grid lines.
    cairo_set_source_rgba(cairo, colours::panel.red, colours::panel.green, colours::panel.blue, 0.85);
    cairo_rectangle(cairo, spot.box.left, spot.box.top, spot.box.right - spot.box.left, spot.box.bottom - spot.box.top);
    cairo_fill(cairo);
    set_colour(cairo, colours::plum);
    draw_text(cairo, spot.text, spot.centre, spot.baseline, Anchor::centre);
  }
}

void ring_leads(cairo_t* cairo, const TraitResults& results, const std::vector<LeadLocus>& leads,
                const ManhattanLayout& layout) {
  set_colour(cairo, colours::plum);
  cairo_set_line_width(cairo, 1.6);
  for (const LeadLocus& lead : leads) {
    const std::size_t variant = results.candidates[lead.candidate_idx].variant_idx;
    cairo_new_sub_path(cairo);
    cairo_arc(cairo, layout.x_of(results.chromosome_of[variant], results.position_of[variant]),
              layout.y_of(results.neg_log_10_p_of[variant]), 5.0, 0, 2 * M_PI);
  }
  cairo_stroke(cairo);
}

void draw_title(cairo_t* cairo, const TraitResults& results, std::size_t lead_count, const ManhattanFacts& facts,
                const ManhattanLayout& layout) {
  set_colour(cairo, colours::ink);
  select_font(cairo, 22.0, true);
  draw_text(cairo, results.trait, layout.frame.left, 38, Anchor::left);
  const std::string facts_text = format_count(results.n_rows) + " " + facts.count_noun + "   \u00b7   " +
                                 facts.lambda_label + " = " + format_lambda(facts.lambda_gc) + "   \u00b7   " +
                                 std::to_string(lead_count) + " " +
                                 (lead_count == 1 ? facts.lead_noun_one : facts.lead_noun_many);
  set_colour(cairo, colours::quiet_ink);
  select_font(cairo, 14.0);
  draw_text(cairo, facts_text, layout.frame.right, 38, Anchor::right);
}

}  // namespace

double ManhattanLayout::x_of(std::uint32_t chromosome, std::int64_t position) const {
  const ChromosomeStrip& strip = strips[chromosome];
  const double span = static_cast<double>(strip.last_position - strip.first_position);
  if (span <= 0) return (strip.x_start + strip.x_end) / 2;
  return strip.x_start + (strip.x_end - strip.x_start) * static_cast<double>(position - strip.first_position) / span;
}

double ManhattanLayout::y_of(double neg_log_10_p) const {
  const double clamped = std::max(0.0, neg_log_10_p);
  return frame.bottom - clamped / y_max * (frame.height() - label_headroom);
}

ManhattanLayout lay_out_manhattan(const TraitResults& results, double highest_line) {
  ManhattanLayout layout;
  layout.frame = PlotFrame{96, 64, layout.width - 54.0, layout.height - 80.0};
  const double top = std::max(results.max_neg_log_10_p, highest_line + 1.0);
  layout.y_max = top * 1.03;

  for (const std::string& name : results.chromosome_names) {
    layout.strips.push_back(ChromosomeStrip{chromosome_display_name(name), 0, 0, 0, 0});
  }
  find_position_ranges(results, layout.strips);
  const std::size_t count = layout.strips.size();
  if (count == 0) return layout;
  // Many contigs (as-is mode) shrink the gaps and the narrowest strip.
  const double gap = std::min(strip_gap, 0.1 * layout.frame.width() / count);
  // Inset so that the outermost dots are not cut by the panel's edge.
  const double inset = 8.0;
  const double available = layout.frame.width() - 2 * inset - gap * (count - 1);
  const double narrowest = std::min(narrowest_strip, 0.5 * available / count);
  std::vector<double> lengths;
  for (const ChromosomeStrip& strip : layout.strips) {
    lengths.push_back(std::max<double>(1.0, static_cast<double>(strip.last_position - strip.first_position)));
  }
  std::vector<double> widths = strip_widths(lengths, available, narrowest);
  double x = layout.frame.left + inset;
  for (std::size_t strip_idx = 0; strip_idx < count; ++strip_idx) {
    layout.strips[strip_idx].x_start = x;
    layout.strips[strip_idx].x_end = x + widths[strip_idx];
    x += widths[strip_idx] + gap;
  }
  return layout;
}

std::vector<PlotPoint> thin_manhattan_points(const TraitResults& results, const ManhattanLayout& layout) {
  const std::size_t columns = static_cast<std::size_t>(layout.width / thinning_cell) + 1;
  const std::size_t rows = static_cast<std::size_t>(layout.height / thinning_cell) + 1;
  std::vector<bool> occupied(columns * rows * 2, false);
  std::vector<PlotPoint> points;
  for (std::size_t variant_idx = 0; variant_idx < results.n_rows; ++variant_idx) {
    const float neg_log_10_p = results.neg_log_10_p_of[variant_idx];
    if (std::isnan(neg_log_10_p)) continue;
    const std::uint32_t chromosome = results.chromosome_of[variant_idx];
    PlotPoint point;
    point.x = static_cast<float>(layout.x_of(chromosome, results.position_of[variant_idx]));
    point.y = static_cast<float>(layout.y_of(neg_log_10_p));
    point.shade = static_cast<unsigned char>(chromosome % 2);
    if (neg_log_10_p < suggestive_neg_log_10_p) {
      const std::size_t column = static_cast<std::size_t>(std::max(0.0f, point.x) / thinning_cell);
      const std::size_t row = static_cast<std::size_t>(std::max(0.0f, point.y) / thinning_cell);
      const std::size_t cell = (std::min(row, rows - 1) * columns + std::min(column, columns - 1)) * 2 + point.shade;
      if (occupied[cell]) continue;
      occupied[cell] = true;
    }
    points.push_back(point);
  }
  return points;
}

std::size_t render_manhattan(const TraitResults& results, const std::vector<LeadLocus>& leads,
                             const ManhattanFacts& facts, const std::string& png_path, const std::string& svg_path) {
  double highest_line = 0;
  for (const SignificanceLine& line : facts.lines) highest_line = std::max(highest_line, line.neg_log_10_p);
  const ManhattanLayout layout = lay_out_manhattan(results, highest_line);
  const std::vector<PlotPoint> points = thin_manhattan_points(results, layout);
  render_png_and_svg(png_path, svg_path, layout.width, layout.height, [&](cairo_t* cairo) {
    draw_background(cairo, layout);
    draw_y_axis(cairo, layout);
    cairo_save(cairo);
    cairo_rectangle(cairo, layout.frame.left, layout.frame.top, layout.frame.width(), layout.frame.height());
    cairo_clip(cairo);
    draw_dots(cairo, points, 0, colours::teal, dot_radius);
    draw_dots(cairo, points, 1, colours::copper, dot_radius);
    cairo_restore(cairo);
    for (const SignificanceLine& line : facts.lines) {
      draw_threshold(cairo, layout, line.neg_log_10_p, line.text, line.primary ? colours::crimson : colours::slate,
                     !line.primary);
    }
    ring_leads(cairo, results, leads, layout);
    draw_lead_labels(cairo, place_lead_labels(cairo, results, leads, layout, facts.label_limit));
    set_colour(cairo, colours::ink);
    cairo_set_line_width(cairo, 1.2);
    cairo_rectangle(cairo, layout.frame.left, layout.frame.top, layout.frame.width(), layout.frame.height());
    cairo_stroke(cairo);
    draw_x_axis(cairo, layout);
    draw_title(cairo, results, leads.size(), facts, layout);
  });
  return points.size();
}

}  // namespace tamis::report
