#include <algorithm>
#include "report/html_page.hpp"

#include <cstdio>
#include <fstream>
#include <set>
#include <sstream>

#include "report/trait_results.hpp"
#include "tamis/errors.hpp"

namespace tamis::report {

namespace {

constexpr std::size_t longest_log_header = 400;  // lines; a header is a few dozen

const char* const page_style = R"(
body { font-family: "DejaVu Sans", Verdana, sans-serif; background: #fcfbf7; color: #262629;
       margin: 0 auto; max-width: 1840px; padding: 24px 32px 48px; }
h1 { font-size: 26px; margin: 0 0 4px; }
h2 { font-size: 21px; margin: 36px 0 10px; border-bottom: 2px solid #1d6f7a; padding-bottom: 4px; }
h3 { font-size: 16px; margin: 18px 0 6px; color: #461f58; }
p.note { color: #6b6e74; font-size: 13px; margin: 4px 0 12px; }
table { border-collapse: collapse; font-size: 13px; margin: 6px 0 12px; }
th { background: #e8efef; text-align: left; padding: 5px 10px; border-bottom: 1px solid #b9c9cb; }
td { padding: 4px 10px; border-bottom: 1px solid #e4e1d8; font-variant-numeric: tabular-nums; }
td.number { text-align: right; white-space: nowrap; }
.table-scroll { overflow-x: auto; }
.plots { display: flex; flex-wrap: wrap; gap: 16px; align-items: flex-start; }
.plots img.manhattan { width: 100%; max-width: 1800px; height: auto; }
.plots img.qq { width: 520px; max-width: 100%; height: auto; }
.plots img.regional { width: 880px; max-width: 100%; height: auto; }
pre { background: #f3f1ea; border: 1px solid #e0dccf; padding: 10px 12px; font-size: 12px;
      overflow-x: auto; white-space: pre-wrap; }
)";

std::string read_binary_file(const std::string& path) {
  std::ifstream file(path, std::ios::binary);
  if (!file) {
    throw Error(ExitCode::output, path, "cannot read back the plot to inline it in the page",
                "check that nothing removed the file while the report ran");
  }
  std::ostringstream bytes;
  bytes << file.rdbuf();
  return bytes.str();
}

std::string png_image(const std::string& path, const std::string& css_class, const std::string& description) {
  return "<img class=\"" + css_class + "\" alt=\"" + escape_html(description) + "\" src=\"data:image/png;base64," +
         encode_base64(read_binary_file(path)) + "\">\n";
}

std::string cell(const std::string& text, bool number = false) {
  return std::string(number ? "<td class=\"number\">" : "<td>") + escape_html(text) + "</td>";
}

std::string header_row(const std::vector<std::string>& names) {
  std::string row = "<tr>";
  for (const std::string& name : names) row += "<th>" + escape_html(name) + "</th>";
  return row + "</tr>\n";
}

std::string summary_table(const PageContent& page) {
  // In a box of its own that scrolls sideways, so that a narrow window
  // scrolls the table, not the page, and numbers stay whole.
  std::string html = "<div class=\"table-scroll\"><table class=\"summary\">\n";
  html += header_row({"trait", "variants", "\u03bb (genomic control)", "p < 5e-8", "lead loci",
                      "max \u2212log10 p", "tests discordant > 1 log10"});
  for (const TraitSection& section : page.sections) {
    html += "<tr>";
    for (std::size_t cell_idx = 0; cell_idx < section.summary_cells.size(); ++cell_idx) {
      html += cell(section.summary_cells[cell_idx], cell_idx > 0);
    }
    html += "</tr>\n";
  }
  return html + "</table></div>\n";
}

std::string loci_table(const TraitSection& section) {
  if (section.loci.empty()) return "<p class=\"note\">No variant passes the lead threshold.</p>\n";
  std::string html = "<div class=\"table-scroll\"><table class=\"loci\">\n";
  html += header_row({"chromosome", "lead position", "lead variant", "rsid", "p", "\u2212log10 p", "beta",
                      "locus start", "locus end", "variants"});
  for (const LocusRow& row : section.loci) {
    html += "<tr>" + cell(row.chromosome) + cell(std::to_string(row.lead_position), true) +
            cell(row.lead_variant_id) + cell(row.lead_rsid == "#NA" ? "" : row.lead_rsid) + cell(row.p_value, true) +
            cell(row.neg_log_10_p_value, true) + cell(row.beta, true) + cell(std::to_string(row.span_start), true) +
            cell(std::to_string(row.span_end), true) + cell(std::to_string(row.n_variants), true) + "</tr>\n";
  }
  html += "</table></div>\n";
  if (section.n_loci_total > section.loci.size()) {
    html += "<p class=\"note\">The " + std::to_string(section.loci.size()) + " most significant of " +
            std::to_string(section.n_loci_total) + " lead loci; the loci table file lists them all.</p>\n";
  }
  return html;
}

std::string set_region(const SetRow& row) {
  return chromosome_display_name(row.chromosome) + ":" + std::to_string(row.start) + "-" + std::to_string(row.end);
}

std::string top_sets_table(const SetSection& sets) {
  if (sets.top.empty()) return "<p class=\"note\">The set results file has no sets.</p>\n";
  std::string html = "<div class=\"table-scroll\"><table class=\"sets\">\n";
  html += header_row({"set", "region", "variants", "total MAC", "burden p", "variance p", "optimal p", "Cauchy p",
                      "overall p", "top variant"});
  for (const SetRow& row : sets.top) {
    html += "<tr>" + cell(row.set) + cell(set_region(row)) + cell(row.n_variants, true) + cell(row.total_mac, true);
    for (const std::string& p_value : row.p_values) html += cell(p_value, true);
    html += cell(row.top_variant) + "</tr>\n";
  }
  html += "</table></div>\n";
  if (sets.n_sets > sets.top.size()) {
    html += "<p class=\"note\">The " + std::to_string(sets.top.size()) + " sets of smallest overall p of " +
            std::to_string(sets.n_sets) + "; the set results file lists them all.</p>\n";
  }
  return html;
}

std::string set_section(const std::string& trait, const SetSection& sets) {
  std::string html = "<h3>Variant sets</h3>\n<p class=\"note\">" + escape_html(sets.results_path) + ": " +
                     std::to_string(sets.n_sets) + " sets; \u03bb of overall p = " + escape_html(sets.lambda_text) +
                     " (the median \u03c7\u00b2(1) quantile of overall p over 0.4549). Each set is drawn at the "
                     "midpoint of its extent by its overall p; the line is p = " + escape_html(sets.line_text) +
                     " (0.05 divided by the number of sets).</p>\n<div class=\"plots\">\n";
  html += png_image(sets.manhattan_png, "manhattan sets", "Manhattan plot of the variant sets of " + trait);
  html += png_image(sets.qq_png, "qq sets", "QQ plot of the variant sets' overall p of " + trait);
  html += "</div>\n<h3>Top variant sets</h3>\n" + top_sets_table(sets);
  return html;
}

std::string regional_section(const TraitSection& section) {
  if (section.regional.empty()) return "";
  std::string html = "<h3>Regional plots</h3>\n<p class=\"note\">The " + std::to_string(section.regional.size()) +
                     " most significant lead loci. Each variant is coloured by its LD r\u00b2 with the lead, "
                     "the squared correlation of their dosages over this trait's analysis samples (missing "
                     "dosages replaced by the variant's mean); hollow grey circles: variants not found in the "
                     "genotype files or without variation. The report's locus_ld.tsv lists every value.";
  if (!section.regional_note.empty()) html += " " + escape_html(section.regional_note);
  html += "</p>\n<div class=\"plots\">\n";
  for (const RegionalEntry& entry : section.regional) {
    html += png_image(entry.png, "regional", "Regional plot of " + section.trait + ", " + entry.description);
  }
  return html + "</div>\n";
}

std::string log_section(const PageContent& page) {
  std::string html;
  std::set<std::string> shown;
  for (const TraitSection& section : page.sections) {
    if (!shown.insert(section.log_path).second) continue;
    const std::vector<std::string> lines = read_log_header(section.log_path);
    if (lines.empty()) continue;
    html += "<h3>" + escape_html(section.log_path) + "</h3>\n<pre>";
    for (const std::string& line : lines) html += escape_html(line) + "\n";
    html += "</pre>\n";
  }
  if (html.empty()) return "";
  return "<h2>Run log</h2>\n<p class=\"note\">The opening lines of each scan's log: command, version, inputs, "
         "samples and null models.</p>\n" + html;
}

std::string format_distance(std::int64_t bases) {
  if (bases >= 1000 && bases % 1000 == 0) return std::to_string(bases / 1000) + " kb";
  return std::to_string(bases) + " bases";
}

}  // namespace

std::string format_p_threshold(double p, int significant_digits) {
  char text[32];
  std::snprintf(text, sizeof text, "%.*g", significant_digits, p);
  std::string written = text;
  // Below 1e-3 in exponent form ("5.4e-4", not "0.00054"): it fits the
  // label beside a plot's line.
  if (p < 1e-3 && written.find('e') == std::string::npos) {
    std::snprintf(text, sizeof text, "%.*e", std::max(significant_digits - 1, 0), p);
    written = text;
    const std::size_t exponent = written.find('e');
    std::string mantissa = written.substr(0, exponent);
    if (mantissa.find('.') != std::string::npos) {
      while (mantissa.back() == '0') mantissa.pop_back();
      if (mantissa.back() == '.') mantissa.pop_back();
    }
    written = mantissa + written.substr(exponent);
  }
  for (const char* padded : {"e-0", "e+0"}) {
    std::size_t at = written.find(padded);
    if (at != std::string::npos) written.erase(at + 2, 1);
  }
  return written;
}

std::string encode_base64(const std::string& bytes) {
  static const char alphabet[] = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
  std::string encoded;
  encoded.reserve((bytes.size() + 2) / 3 * 4);
  std::size_t byte_idx = 0;
  for (; byte_idx + 2 < bytes.size(); byte_idx += 3) {
    const unsigned group = (static_cast<unsigned char>(bytes[byte_idx]) << 16) |
                           (static_cast<unsigned char>(bytes[byte_idx + 1]) << 8) |
                           static_cast<unsigned char>(bytes[byte_idx + 2]);
    for (int shift = 18; shift >= 0; shift -= 6) encoded += alphabet[(group >> shift) & 0x3f];
  }
  const std::size_t left = bytes.size() - byte_idx;
  if (left > 0) {
    unsigned group = static_cast<unsigned char>(bytes[byte_idx]) << 16;
    if (left == 2) group |= static_cast<unsigned char>(bytes[byte_idx + 1]) << 8;
    encoded += alphabet[(group >> 18) & 0x3f];
    encoded += alphabet[(group >> 12) & 0x3f];
    encoded += left == 2 ? alphabet[(group >> 6) & 0x3f] : '=';
    encoded += '=';
  }
  return encoded;
}

std::string escape_html(const std::string& text) {
  std::string escaped;
  for (char letter : text) {
    switch (letter) {
      case '&': escaped += "&amp;"; break;
      case '<': escaped += "&lt;"; break;
      case '>': escaped += "&gt;"; break;
      case '"': escaped += "&quot;"; break;
      default: escaped += letter;
    }
  }
  return escaped;
}

std::vector<std::string> read_log_header(const std::string& log_path) {
  std::vector<std::string> lines;
  std::ifstream log(log_path);
  std::string line;
  while (std::getline(log, line) && lines.size() < longest_log_header) {
    if (line.compare(0, 5, "read ") == 0) break;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    lines.push_back(line);
  }
  return lines;
}

std::string compose_html_page(const PageContent& page) {
  std::string html = "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n";
  html += "<title>tamis report</title>\n<style>" + std::string(page_style) + "</style>\n</head>\n<body>\n";
  html += "<h1>tamis report</h1>\n";
  html += "<p class=\"note\">Lead loci: p &lt; " + format_p_threshold(page.lead_threshold) +
          ", each lead taking the variants within " + format_distance(page.locus_radius) +
          " of it on its chromosome. Lines on the Manhattan plots: p = 5e-8 (genome-wide) and 1e-5 "
          "(suggestive). These are statistical associations; any clinical or diagnostic use goes through "
          "qualified review and local rules.</p>\n";
  html += "<h2>Summary</h2>\n" + summary_table(page);
  for (const TraitSection& section : page.sections) {
    html += "<h2>" + escape_html(section.trait) + "</h2>\n";
    html += "<p class=\"note\">" + escape_html(section.results_path) + "</p>\n<div class=\"plots\">\n";
    html += png_image(section.manhattan_png, "manhattan", "Manhattan plot of " + section.trait);
    html += png_image(section.qq_png, "qq", "QQ plot of " + section.trait);
    html += "</div>\n<h3>Lead loci</h3>\n" + loci_table(section);
    html += regional_section(section);
    if (section.sets) html += set_section(section.trait, *section.sets);
  }
  html += log_section(page);
  html += "</body>\n</html>\n";
  return html;
}

}  // namespace tamis::report
