#include "report/plot_canvas.hpp"

#include <cairo-svg.h>

#include <cmath>
#include <cstdio>

#include "tamis/errors.hpp"

namespace tamis::report {

namespace {

constexpr double subscript_scale = 0.72;
constexpr double subscript_drop = 0.32;  // of the font size

void check_cairo(cairo_status_t status, const std::string& path) {
  if (status != CAIRO_STATUS_SUCCESS) {
    throw Error(ExitCode::output, path, std::string("cannot write the plot: ") + cairo_status_to_string(status),
                "check that the output directory is writable and the disk is not full");
  }
}

void commit_temporary(const std::string& temporary, const std::string& final_path) {
  if (std::rename(temporary.c_str(), final_path.c_str()) != 0) {
    std::remove(temporary.c_str());
    throw Error(ExitCode::output, final_path, "cannot rename the finished plot into place",
                "check that the output directory is writable");
  }
}

void draw_into(cairo_surface_t* surface, const std::string& path, const std::function<void(cairo_t*)>& draw) {
  cairo_t* cairo = cairo_create(surface);
  draw(cairo);
  cairo_status_t status = cairo_status(cairo);
  cairo_destroy(cairo);
  check_cairo(status, path);
}

}  // namespace

bool TextBox::overlaps(const TextBox& other, double padding) const {
  return left < other.right + padding && other.left < right + padding && top < other.bottom + padding &&
         other.top < bottom + padding;
}

void set_colour(cairo_t* cairo, Rgb colour) { cairo_set_source_rgb(cairo, colour.red, colour.green, colour.blue); }

void paint_paper_and_panel(cairo_t* cairo, const PlotFrame& frame) {
  set_colour(cairo, colours::paper);
  cairo_paint(cairo);
  set_colour(cairo, colours::panel);
  cairo_rectangle(cairo, frame.left, frame.top, frame.width(), frame.height());
  cairo_fill(cairo);
}

void select_font(cairo_t* cairo, double size, bool bold) {
  cairo_select_font_face(cairo, plot_font, CAIRO_FONT_SLANT_NORMAL,
                         bold ? CAIRO_FONT_WEIGHT_BOLD : CAIRO_FONT_WEIGHT_NORMAL);
  cairo_set_font_size(cairo, size);
}

double text_width(cairo_t* cairo, const std::string& text) {
  cairo_text_extents_t extents;
  cairo_text_extents(cairo, text.c_str(), &extents);
  return extents.x_advance;
}

TextBox draw_text(cairo_t* cairo, const std::string& text, double x, double y, Anchor anchor) {
  cairo_font_extents_t font;
  cairo_font_extents(cairo, &font);
  const double width = text_width(cairo, text);
  double left = x;
  if (anchor == Anchor::centre) left = x - width / 2;
  if (anchor == Anchor::right) left = x - width;
  cairo_move_to(cairo, left, y);
  cairo_show_text(cairo, text.c_str());
  return TextBox{left, y - font.ascent * 0.8, left + width, y + font.descent * 0.5};
}

void draw_log10_p_caption(cairo_t* cairo, const std::string& before, const std::string& after, double x,
                          double y, double size) {
  const std::string head = before + "\u2212log";  // a true minus sign
  const std::string tail = " p" + after;
  select_font(cairo, size);
  const double head_width = text_width(cairo, head);
  const double tail_width = text_width(cairo, tail);
  select_font(cairo, size * subscript_scale);
  const double sub_width = text_width(cairo, "10");
  double left = x - (head_width + sub_width + tail_width) / 2;
  select_font(cairo, size);
  draw_text(cairo, head, left, y, Anchor::left);
  select_font(cairo, size * subscript_scale);
  draw_text(cairo, "10", left + head_width, y + size * subscript_drop, Anchor::left);
  select_font(cairo, size);
  draw_text(cairo, tail, left + head_width + sub_width, y, Anchor::left);
}

std::vector<double> choose_ticks(double top, int wanted) {
  const double rough = std::max(top, 1e-9) / wanted;
  const double magnitude = std::pow(10.0, std::floor(std::log10(rough)));
  double step = magnitude;
  for (double factor : {1.0, 2.0, 5.0, 10.0}) {
    step = factor * magnitude;
    if (step >= rough) break;
  }
  std::vector<double> ticks;
  for (int tick_idx = 0; tick_idx * step <= top * (1 + 1e-9); ++tick_idx) ticks.push_back(tick_idx * step);
  return ticks;
}

std::string format_tick(double value, double step) {
  char text[32];
  if (step >= 1.0) {
    std::snprintf(text, sizeof text, "%.0f", value);
  } else if (step * 10 >= 1.0 - 1e-9) {
    std::snprintf(text, sizeof text, "%.1f", value);
  } else {
    std::snprintf(text, sizeof text, "%.2f", value);
  }
  return text;
}

std::string format_count(std::size_t count) {
  std::string digits = std::to_string(count);
  for (int insert_at = static_cast<int>(digits.size()) - 3; insert_at > 0; insert_at -= 3) {
    digits.insert(static_cast<std::size_t>(insert_at), ",");
  }
  return digits;
}

std::string format_lambda(double lambda_gc) {
  if (std::isnan(lambda_gc)) return "not available";
  char text[32];
  std::snprintf(text, sizeof text, "%.3f", lambda_gc);
  return text;
}

void draw_dots(cairo_t* cairo, const std::vector<PlotPoint>& points, unsigned char shade, Rgb colour,
               double radius) {
  cairo_save(cairo);
  cairo_new_path(cairo);
  for (const PlotPoint& point : points) {
    if (point.shade != shade) continue;
    cairo_move_to(cairo, point.x, point.y);
    cairo_close_path(cairo);
  }
  set_colour(cairo, colour);
  cairo_set_line_cap(cairo, CAIRO_LINE_CAP_ROUND);
  cairo_set_line_width(cairo, 2 * radius);
  cairo_stroke(cairo);
  cairo_restore(cairo);
}

void render_png_and_svg(const std::string& png_path, const std::string& svg_path, int width, int height,
                        const std::function<void(cairo_t*)>& draw) {
  const std::string png_temporary = png_path + ".partial";
  cairo_surface_t* image = cairo_image_surface_create(CAIRO_FORMAT_RGB24, width, height);
  try {
    draw_into(image, png_path, draw);
    check_cairo(cairo_surface_write_to_png(image, png_temporary.c_str()), png_path);
  } catch (...) {
    cairo_surface_destroy(image);
    std::remove(png_temporary.c_str());
    throw;
  }
  cairo_surface_destroy(image);
  commit_temporary(png_temporary, png_path);

  const std::string svg_temporary = svg_path + ".partial";
  cairo_surface_t* vector = cairo_svg_surface_create(svg_temporary.c_str(), width, height);
  try {
    draw_into(vector, svg_path, draw);
    cairo_surface_finish(vector);
    check_cairo(cairo_surface_status(vector), svg_path);
  } catch (...) {
    cairo_surface_destroy(vector);
    std::remove(svg_temporary.c_str());
    throw;
  }
  cairo_surface_destroy(vector);
  commit_temporary(svg_temporary, svg_path);
}

}  // namespace tamis::report
