// Helpers shared by the test executables.
#pragma once

#include <string>
#include <vector>

namespace tamis::testing {

// A fresh, empty directory for one test process (under TAMIS_TEST_TMP or /tmp).
std::string make_temp_dir(const std::string& test_name);

// Runs a shell command; returns its exit status (the code, not the raw wait status).
int run_command(const std::string& command);

// Runs a shell command and returns what it printed on stdout.
std::string capture_command(const std::string& command, int* exit_code = nullptr);

std::string read_text_file(const std::string& path);
void write_text_file(const std::string& path, const std::string& text);
// The decompressed text of a gzip / BGZF file.
std::string read_gzip_file(const std::string& path);
bool file_exists(const std::string& path);

// Text helpers for results files: the fields of one line, the lines of a
// text, and the data rows (header left out) split into fields.
std::vector<std::string> split_fields(const std::string& line, char separator = '\t');
std::vector<std::string> lines_of(const std::string& text);
std::vector<std::vector<std::string>> data_rows(const std::string& text);

// Path of the tamis executable under test and of the source tree.
std::string tamis_binary();
std::string source_dir();

}  // namespace tamis::testing
