#include "support/test_support.hpp"

#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>
#include <zlib.h>

#include <array>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <sstream>
#include <stdexcept>

namespace tamis::testing {

std::string make_temp_dir(const std::string& test_name) {
  const char* root = std::getenv("TAMIS_TEST_TMP");
  std::string base = root ? root : "/tmp/tamis_tests";
  // ctest runs each test in its own process, several at once: the process ID
  // keeps their directories apart.
  std::string dir = base + "/" + test_name + "." + std::to_string(getpid());
  run_command("rm -rf '" + dir + "' && mkdir -p '" + dir + "'");
  return dir;
}

int run_command(const std::string& command) {
  int status = std::system(command.c_str());
  if (status == -1) return -1;
  if (WIFEXITED(status)) return WEXITSTATUS(status);
  return 128 + WTERMSIG(status);
}

std::string capture_command(const std::string& command, int* exit_code) {
  FILE* pipe = popen(command.c_str(), "r");
  if (!pipe) throw std::runtime_error("popen failed: " + command);
  std::string output;
  std::array<char, 4096> buffer;
  size_t got;
  while ((got = fread(buffer.data(), 1, buffer.size(), pipe)) > 0) output.append(buffer.data(), got);
  int status = pclose(pipe);
  if (exit_code) *exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  return output;
}

std::string read_text_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw std::runtime_error("cannot open " + path);
  std::stringstream buffer;
  buffer << in.rdbuf();
  return buffer.str();
}

void write_text_file(const std::string& path, const std::string& text) {
  std::ofstream out(path, std::ios::binary);
  out << text;
}

std::string read_gzip_file(const std::string& path) {
  gzFile file = gzopen(path.c_str(), "rb");
  if (!file) throw std::runtime_error("cannot open " + path);
  std::string text;
  std::array<char, 65536> buffer;
  int got;
  while ((got = gzread(file, buffer.data(), buffer.size())) > 0) text.append(buffer.data(), got);
  gzclose(file);
  return text;
}

bool file_exists(const std::string& path) {
  struct stat info;
  return stat(path.c_str(), &info) == 0;
}

std::vector<std::string> split_fields(const std::string& line, char separator) {
  std::vector<std::string> fields;
  std::size_t start = 0;
  while (true) {
    const std::size_t end = line.find(separator, start);
    fields.push_back(line.substr(start, end == std::string::npos ? std::string::npos : end - start));
    if (end == std::string::npos) return fields;
    start = end + 1;
  }
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> lines;
  std::istringstream stream(text);
  std::string line;
  while (std::getline(stream, line)) lines.push_back(line);
  return lines;
}

std::vector<std::vector<std::string>> data_rows(const std::string& text) {
  std::vector<std::vector<std::string>> rows;
  const std::vector<std::string> lines = lines_of(text);
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) rows.push_back(split_fields(lines[line_idx]));
  return rows;
}

std::string tamis_binary() { return TAMIS_BINARY; }
std::string source_dir() { return TAMIS_SOURCE_DIR; }

}  // namespace tamis::testing
