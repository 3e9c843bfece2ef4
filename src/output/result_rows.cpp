// GWAS-SSF result rows: column order, number formatting, chromosome codes.
#include <charconv>
#include <cmath>
#include <cstdio>
#include <string>

#include "tamis/results_writer.hpp"

namespace tamis {

namespace {

constexpr const char* missing_text = "#NA";

// Below this, exp() of the logarithm loses precision to subnormals, so the
// p-value is rebuilt from log10 instead. exp(-700) is about 1e-304, safely
// above DBL_MIN (2.2e-308).
constexpr double smallest_direct_log_p = -700.0;

void append_text(std::string& out, const std::string& text) {
  out += text.empty() ? missing_text : text;
}

// Nine significant digits, exactly as printf's "%.9g" writes them (the
// standard defines std::to_chars by it), at a fraction of its cost: a scan
// formats a dozen numbers for every variant.
void append_nine_digits(std::string& out, double value) {
  char buffer[40];
  const std::to_chars_result written =
      std::to_chars(buffer, buffer + sizeof buffer, value, std::chars_format::general, 9);
  out.append(buffer, written.ptr);
}

// GWAS-SSF writes any value that is not a finite number as "#NA".
void append_number(std::string& out, double value) {
  if (!std::isfinite(value)) {
    out += missing_text;
    return;
  }
  append_nine_digits(out, value);
}

void append_optional_number(std::string& out, const std::optional<double>& value) {
  if (value) {
    append_number(out, *value);
  } else {
    out += missing_text;
  }
}

void append_optional_p_value(std::string& out, const std::optional<double>& log_p) {
  out += log_p ? format_p_value(*log_p) : missing_text;
}

void append_count(std::string& out, std::size_t value) { out += std::to_string(value); }

void append_optional_count(std::string& out, const std::optional<std::size_t>& value) {
  if (value) {
    append_count(out, *value);
  } else {
    out += missing_text;
  }
}

// Matches format_p_value: a p-value written as "1" has -log10 p of exactly 0
// (never "-0").
double negative_log10_p(double log_p) {
  if (log_p >= 0.0) return 0.0;
  return -log_p / std::log(10.0);
}

bool is_autosome_code(const std::string& text) {
  if (text.empty() || text.size() > 2 || text[0] == '0') return false;
  for (char digit : text) {
    if (digit < '0' || digit > '9') return false;
  }
  int number = std::stoi(text);
  return number >= 1 && number <= 22;
}

std::string to_upper(std::string text) {
  for (char& letter : text) {
    if (letter >= 'a' && letter <= 'z') letter = static_cast<char>(letter - 'a' + 'A');
  }
  return text;
}

// The column names joined by tabs, with '\n'.
std::string header_line_of(const std::vector<std::string>& columns) {
  std::string line;
  for (const std::string& column : columns) {
    if (!line.empty()) line += '\t';
    line += column;
  }
  line += '\n';
  return line;
}

}  // namespace

const std::vector<std::string>& result_columns() {
  static const std::vector<std::string> columns = {
      "chromosome", "base_pair_location", "effect_allele", "other_allele",
      "beta", "standard_error", "effect_allele_frequency", "p_value",
      "variant_id", "rsid", "n", "info", "ref_allele", "test",
      "neg_log_10_p_value", "score_chisq", "score_p", "wald_chisq", "wald_p",
      "lrt_chisq", "lrt_p", "log10p_spread", "mac", "call_rate", "hwe_p", "n_cases"};
  return columns;
}

std::string result_header_line() { return header_line_of(result_columns()); }

void append_result_number(double value, std::string& out) { append_number(out, value); }

std::string result_header_line(const std::vector<std::string>& extra_columns) {
  std::vector<std::string> columns = result_columns();
  columns.insert(columns.end(), extra_columns.begin(), extra_columns.end());
  return header_line_of(columns);
}

std::string format_p_value(double log_p) {
  if (std::isnan(log_p) || log_p == -INFINITY) return missing_text;
  if (log_p >= 0.0) return "1";
  char buffer[48];
  if (log_p > smallest_direct_log_p) {
    std::string text;
    append_nine_digits(text, std::exp(log_p));
    return text;
  }
  const double log10_p = log_p / std::log(10.0);
  double exponent = std::floor(log10_p);
  double mantissa = std::pow(10.0, log10_p - exponent);
  // Round to the nine significant digits that "%.9g" shows, so that a mantissa
  // of 9.9999999996 becomes 1 with the exponent raised rather than "10e-1000".
  mantissa = std::round(mantissa * 1e8) / 1e8;
  if (mantissa >= 10.0) {
    mantissa /= 10.0;
    exponent += 1.0;
  }
  std::snprintf(buffer, sizeof buffer, "%.9ge%d", mantissa, static_cast<int>(exponent));
  return buffer;
}

void append_result_row(const ResultRow& row, std::string& out) {
  append_text(out, row.chromosome);
  out += '\t';
  out += std::to_string(row.position);
  out += '\t';
  append_text(out, row.effect_allele);
  out += '\t';
  append_text(out, row.other_allele);
  out += '\t';
  append_number(out, row.beta);
  out += '\t';
  append_number(out, row.standard_error);
  out += '\t';
  append_number(out, row.effect_allele_frequency);
  out += '\t';
  out += format_p_value(row.log_p);
  out += '\t';
  append_text(out, row.variant_id);
  out += '\t';
  append_text(out, row.rsid);
  out += '\t';
  append_count(out, row.n);
  out += '\t';
  append_optional_number(out, row.info);
  out += '\t';
  // The effect allele is always ALT, so the reference is the other allele.
  out += "OA";
  out += '\t';
  append_text(out, row.test);
  out += '\t';
  append_number(out, negative_log10_p(row.log_p));
  out += '\t';
  append_number(out, row.score_chisq);
  out += '\t';
  out += format_p_value(row.score_log_p);
  out += '\t';
  append_optional_number(out, row.wald_chisq);
  out += '\t';
  append_optional_p_value(out, row.wald_log_p);
  out += '\t';
  append_optional_number(out, row.lrt_chisq);
  out += '\t';
  append_optional_p_value(out, row.lrt_log_p);
  out += '\t';
  append_optional_number(out, row.log10p_spread);
  out += '\t';
  append_number(out, row.mac);
  out += '\t';
  append_number(out, row.call_rate);
  out += '\t';
  append_optional_p_value(out, row.hwe_log_p);
  out += '\t';
  append_optional_count(out, row.n_cases);
  out += row.extra_fields;
  out += '\n';
}

std::optional<std::string> map_chromosome_ssf(const std::string& contig) {
  std::string name = contig;
  if (name.size() > 3 && to_upper(name.substr(0, 3)) == "CHR") name = name.substr(3);
  if (is_autosome_code(name)) return name;
  const std::string upper = to_upper(name);
  if (upper == "X" || upper == "23") return std::string("23");
  if (upper == "Y" || upper == "24") return std::string("24");
  if (upper == "MT" || upper == "M" || upper == "25") return std::string("25");
  return std::nullopt;
}

const std::vector<std::string>& set_result_columns() {
  static const std::vector<std::string> columns = {
      "set", "chromosome", "start", "end", "n_variants", "total_mac", "burden_p", "variance_p", "optimal_p",
      "cauchy_p", "overall_p", "neg_log_10_overall_p", "burden_beta", "burden_se", "burden_chisq", "burden_test",
      "variance_q", "variance_method", "optimal_rho", "optimal_min_p", "top_variant", "top_variant_p",
      "n_collapsed", "weights", "n", "n_cases"};
  return columns;
}

std::string set_result_header_line() { return header_line_of(set_result_columns()); }

void append_set_result_row(const SetResultRow& row, std::string& out) {
  append_text(out, row.set);
  out += '\t';
  append_text(out, row.chromosome);
  out += '\t';
  out += std::to_string(row.start);
  out += '\t';
  out += std::to_string(row.end);
  out += '\t';
  append_count(out, row.n_variants);
  out += '\t';
  append_number(out, row.total_mac);
  for (double log_p : {row.burden_log_p, row.variance_log_p, row.optimal_log_p, row.cauchy_log_p,
                       row.overall_log_p}) {
    out += '\t';
    out += format_p_value(log_p);
  }
  out += '\t';
  append_number(out, negative_log10_p(row.overall_log_p));
  for (double value : {row.burden_beta, row.burden_se, row.burden_chisq}) {
    out += '\t';
    append_number(out, value);
  }
  out += '\t';
  append_text(out, row.burden_test);
  out += '\t';
  append_number(out, row.variance_q);
  out += '\t';
  append_text(out, row.variance_method);
  out += '\t';
  append_number(out, row.optimal_rho);
  out += '\t';
  out += format_p_value(row.optimal_min_log_p);
  out += '\t';
  append_text(out, row.top_variant);
  out += '\t';
  out += format_p_value(row.top_variant_log_p);
  out += '\t';
  append_count(out, row.n_collapsed);
  out += '\t';
  append_text(out, row.weights);
  out += '\t';
  append_count(out, row.n);
  out += '\t';
  append_optional_count(out, row.n_cases);
  out += '\n';
}

}  // namespace tamis
