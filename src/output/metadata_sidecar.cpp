// The GWAS-SSF metadata file that travels beside a results file.
#include <cassert>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <string>

#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {

namespace {

// The data file follows the v1.1 column set; the sample block follows the
// standard's metadata schema (schema/metadata-yamale-schema.yaml of the
// GWAS-SSF repository), where sizes and case counts sit under `samples`.
constexpr const char* ssf_file_type = "GWAS-SSF v1.1";

// Double-quoted YAML scalars accept any text once backslash, quote and
// control characters are escaped, so every free-text value is written so.
std::string quote_yaml(const std::string& text) {
  std::string quoted = "\"";
  for (unsigned char letter : text) {
    switch (letter) {
      case '"': quoted += "\\\""; break;
      case '\\': quoted += "\\\\"; break;
      case '\n': quoted += "\\n"; break;
      case '\t': quoted += "\\t"; break;
      case '\r': quoted += "\\r"; break;
      default:
        if (letter < 0x20 || letter == 0x7f) {
          char escape[8];
          std::snprintf(escape, sizeof escape, "\\x%02x", letter);
          quoted += escape;
        } else {
          quoted += static_cast<char>(letter);
        }
    }
  }
  quoted += '"';
  return quoted;
}

bool is_plain_yaml_key(const std::string& key) {
  if (key.empty()) return false;
  for (char letter : key) {
    bool allowed = (letter >= 'a' && letter <= 'z') || (letter >= 'A' && letter <= 'Z') ||
                   (letter >= '0' && letter <= '9') || letter == '_' || letter == '-' ||
                   letter == '.';
    if (!allowed) return false;
  }
  return true;
}

// Extra values go in as given when YAML would read them back unchanged;
// anything that could be mistaken for structure (": ", " #", quotes,
// brackets, leading or trailing spaces, line breaks) is quoted instead.
std::string extra_value_text(const std::string& value) {
  if (value.empty()) return "\"\"";
  const std::string indicators = "-?:,[]{}#&*!|>'\"%@`";
  bool plain = indicators.find(value.front()) == std::string::npos && value.front() != ' ' &&
               value.back() != ' ' && value.find(": ") == std::string::npos &&
               value.find(" #") == std::string::npos && value.back() != ':';
  for (unsigned char letter : value) {
    if (letter < 0x20 || letter == 0x7f || letter == '"' || letter == '\'') plain = false;
  }
  return plain ? value : quote_yaml(value);
}

std::string base_name_of(const std::string& path) {
  std::size_t slash = path.find_last_of('/');
  return slash == std::string::npos ? path : path.substr(slash + 1);
}

std::string sidecar_text(const std::string& data_path, const SidecarFields& fields) {
  const std::string file_name =
      fields.data_file_name.empty() ? base_name_of(data_path) : fields.data_file_name;
  const std::string assembly = fields.genome_assembly.empty() ? "unknown" : fields.genome_assembly;
  const std::string version =
      fields.software_version.empty() ? std::string(TAMIS_VERSION) : fields.software_version;

  std::string text;
  text += "# GWAS-SSF metadata for " + file_name + "\n";
  text += "data_file_name: " + quote_yaml(file_name) + "\n";
  text += "file_type: " + quote_yaml(ssf_file_type) + "\n";
  text += "data_file_md5sum: " + quote_yaml(md5_hex_of_file(data_path)) + "\n";
  text += "genome_assembly: " + quote_yaml(assembly) + "\n";
  text += "coordinate_system: 1-based\n";
  text += "is_harmonised: false\n";
  text += "is_sorted: true\n";
  text += "analysis_software: " + quote_yaml("tamis " + version) + "\n";
  if (fields.adjusted_covariates.empty()) {
    text += "adjusted_covariates: []\n";
  } else {
    text += "adjusted_covariates:\n";
    for (const std::string& covariate : fields.adjusted_covariates) {
      text += "  - " + quote_yaml(covariate) + "\n";
    }
  }
  text += "trait_description:\n";
  text += "  - " + quote_yaml(fields.trait_description) + "\n";
  text += "samples:\n";
  text += "  - sample_size: " + std::to_string(fields.sample_size) + "\n";
  text += std::string("    case_control_study: ") + (fields.case_count ? "true" : "false") + "\n";
  if (fields.case_count) text += "    case_count: " + std::to_string(*fields.case_count) + "\n";
  if (fields.control_count) {
    text += "    control_count: " + std::to_string(*fields.control_count) + "\n";
  }
  for (const auto& [key, value] : fields.extra) {
    assert(is_plain_yaml_key(key) && "extra sidecar keys are chosen by tamis, not the user");
    (void)is_plain_yaml_key;
    text += key + ": " + extra_value_text(value) + "\n";
  }
  return text;
}

std::string unquote_yaml(const std::string& text) {
  if (text.size() < 2 || text.front() != '"' || text.back() != '"') return text;
  std::string plain;
  for (std::size_t char_idx = 1; char_idx + 1 < text.size(); ++char_idx) {
    char letter = text[char_idx];
    if (letter != '\\' || char_idx + 2 >= text.size()) {
      plain += letter;
      continue;
    }
    const char escaped = text[++char_idx];
    switch (escaped) {
      case 'n': plain += '\n'; break;
      case 't': plain += '\t'; break;
      case 'r': plain += '\r'; break;
      case 'x':
        if (char_idx + 2 < text.size()) {
          plain += static_cast<char>(std::stoi(text.substr(char_idx + 1, 2), nullptr, 16));
          char_idx += 2;
        }
        break;
      default: plain += escaped;
    }
  }
  return plain;
}

// Splits "key: value" (value may be empty); false for lines of another shape.
bool split_key_value(const std::string& line, std::string& key, std::string& value) {
  const std::size_t colon = line.find(':');
  if (colon == std::string::npos) return false;
  key = line.substr(0, colon);
  const std::size_t start = line.find_first_not_of(' ', colon + 1);
  value = start == std::string::npos ? std::string() : line.substr(start);
  return true;
}

std::size_t parse_count(const std::string& text, const std::string& where) {
  char* end = nullptr;
  const unsigned long long value = std::strtoull(text.c_str(), &end, 10);
  if (text.empty() || *end != '\0') {
    throw Error(ExitCode::results_input, where, "expected a count, found '" + text + "'",
                "the metadata file was edited or damaged; rerun the scan that wrote it");
  }
  return static_cast<std::size_t>(value);
}

}  // namespace

SidecarFields read_metadata_sidecar(const std::string& sidecar_path, std::string* data_md5) {
  std::ifstream input(sidecar_path);
  if (!input) {
    throw Error(ExitCode::results_input, sidecar_path, "cannot read the metadata file",
                "each results file needs its FILE-meta.yaml beside it");
  }
  SidecarFields fields;
  std::string line, list_key, key, value;
  std::size_t line_number = 0;
  while (std::getline(input, line)) {
    ++line_number;
    const std::string where = sidecar_path + ", line " + std::to_string(line_number);
    if (line.empty() || line[0] == '#') continue;
    if (line.rfind("  - ", 0) == 0 && list_key != "samples") {
      const std::string item = unquote_yaml(line.substr(4));
      if (list_key == "adjusted_covariates") fields.adjusted_covariates.push_back(item);
      if (list_key == "trait_description") fields.trait_description = item;
      continue;
    }
    if (line[0] == ' ') {
      std::string trimmed = line.substr(line.find_first_not_of(" -"));
      if (!split_key_value(trimmed, key, value)) continue;
      if (key == "sample_size") fields.sample_size = parse_count(value, where);
      if (key == "case_count") fields.case_count = parse_count(value, where);
      if (key == "control_count") fields.control_count = parse_count(value, where);
      continue;
    }
    if (!split_key_value(line, key, value)) {
      throw Error(ExitCode::results_input, where, "expected 'key: value'",
                  "the metadata file was edited or damaged; rerun the scan that wrote it");
    }
    list_key = value.empty() ? key : std::string();
    value = unquote_yaml(value);
    if (key == "data_file_name") {
      fields.data_file_name = value;
    } else if (key == "genome_assembly") {
      fields.genome_assembly = value;
    } else if (key == "data_file_md5sum") {
      if (data_md5) *data_md5 = value;
    } else if (key == "analysis_software") {
      fields.software_version = value.rfind("tamis ", 0) == 0 ? value.substr(6) : value;
    } else if (key == "file_type" || key == "coordinate_system" || key == "is_harmonised" ||
               key == "is_sorted" || key == "adjusted_covariates" || key == "trait_description" ||
               key == "samples") {
      continue;
    } else {
      fields.extra.emplace_back(key, value);
    }
  }
  return fields;
}

void write_metadata_sidecar(const std::string& data_path, const SidecarFields& fields) {
  PlainTextFile sidecar(data_path + "-meta.yaml");
  sidecar.write(sidecar_text(data_path, fields));
  sidecar.commit();
}

}  // namespace tamis
