// Drawing helpers shared by the Manhattan and QQ plots: one drawing routine
// renders into a PNG (cairo image surface) and an SVG (cairo SVG surface).
#pragma once

#include <cairo.h>

#include <functional>
#include <string>
#include <vector>

namespace tamis::report {

struct Rgb {
  double red, green, blue;
};

// The report's own palette.
namespace colours {
constexpr Rgb paper{0.988, 0.984, 0.969};        // page background
constexpr Rgb panel{1.0, 1.0, 1.0};              // plot area
constexpr Rgb band{0.945, 0.937, 0.910};         // every other chromosome's strip
constexpr Rgb grid{0.890, 0.882, 0.855};
constexpr Rgb ink{0.149, 0.149, 0.161};          // text and axes
constexpr Rgb quiet_ink{0.420, 0.431, 0.455};    // secondary text
constexpr Rgb teal{0.114, 0.435, 0.478};         // first chromosome shade, QQ points
constexpr Rgb copper{0.761, 0.416, 0.180};       // second chromosome shade, QQ diagonal
constexpr Rgb crimson{0.702, 0.149, 0.243};      // genome-wide line
constexpr Rgb slate{0.427, 0.482, 0.553};        // suggestive line
constexpr Rgb plum{0.275, 0.122, 0.345};         // lead loci and their labels
constexpr Rgb mist{0.835, 0.886, 0.894};         // QQ confidence band
}  // namespace colours

constexpr const char* plot_font = "DejaVu Sans";

// The plot panel in device units (pixels of the PNG, user units of the SVG).
struct PlotFrame {
  double left = 0, top = 0, right = 0, bottom = 0;
  double width() const { return right - left; }
  double height() const { return bottom - top; }
};

struct TextBox {
  double left = 0, top = 0, right = 0, bottom = 0;
  bool overlaps(const TextBox& other, double padding) const;
};

// A point to draw, already in device units; shade picks the colour.
struct PlotPoint {
  float x = 0, y = 0;
  unsigned char shade = 0;
};

enum class Anchor { left, centre, right };

void set_colour(cairo_t* cairo, Rgb colour);
// The page's paper, and the plotting panel over `frame`.
void paint_paper_and_panel(cairo_t* cairo, const PlotFrame& frame);
void select_font(cairo_t* cairo, double size, bool bold = false);
double text_width(cairo_t* cairo, const std::string& text);
// Draws text with its baseline at y; returns the box it covers.
TextBox draw_text(cairo_t* cairo, const std::string& text, double x, double y, Anchor anchor);
// "BEFORE-log10 pAFTER" with a lowered 10, centred on x with its baseline at y.
void draw_log10_p_caption(cairo_t* cairo, const std::string& before, const std::string& after, double x,
                          double y, double size);

// Round tick values from 0 to at least `top`, about `wanted` of them.
std::vector<double> choose_ticks(double top, int wanted);
std::string format_tick(double value, double step);
std::string format_count(std::size_t count);
std::string format_lambda(double lambda_gc);  // "1.013", or "not available" for NaN  // 2000000 -> "2,000,000"

// Dots as zero-length strokes with round caps: cairo draws them as discs,
// and the SVG holds one short path command per point.
void draw_dots(cairo_t* cairo, const std::vector<PlotPoint>& points, unsigned char shade, Rgb colour,
               double radius);

// Renders `draw` twice, into PNG_PATH and SVG_PATH, each written under a
// temporary name and renamed when complete. Throws tamis::Error (output).
void render_png_and_svg(const std::string& png_path, const std::string& svg_path, int width, int height,
                        const std::function<void(cairo_t*)>& draw);

}  // namespace tamis::report
