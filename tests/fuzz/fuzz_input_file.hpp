// The fuzz input as a file, for entry points that take a path. One file per
// process, rewritten for every input; kept in memory-backed /dev/shm when it
// exists so that the disk does not slow the fuzzer down.
#pragma once

#include <unistd.h>
#include <zlib.h>

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <string>

#include "tamis/genotype_reader.hpp"

namespace tamis::fuzzing {

class FuzzInputFile {
 public:
  explicit FuzzInputFile(const std::string& suffix) {
    const char* folder = access("/dev/shm", W_OK) == 0 ? "/dev/shm" : "/tmp";
    path_ = std::string(folder) + "/tamis-fuzz-XXXXXX" + suffix;
    const int descriptor = mkstemps(path_.data(), static_cast<int>(suffix.size()));
    if (descriptor < 0) {
      std::perror("tamis fuzz: cannot create the input file");
      std::abort();
    }
    close(descriptor);
  }
  ~FuzzInputFile() { unlink(path_.c_str()); }
  FuzzInputFile(const FuzzInputFile&) = delete;
  FuzzInputFile& operator=(const FuzzInputFile&) = delete;

  const std::string& path() const { return path_; }

  void write(const void* data, std::size_t size) const {
    std::FILE* file = std::fopen(path_.c_str(), "wb");
    const bool written = file && std::fwrite(data, 1, size, file) == size;
    if (!file || std::fclose(file) != 0 || !written) {
      std::perror("tamis fuzz: cannot write the input file");
      std::abort();
    }
  }
  void write(const std::string& text) const { write(text.data(), text.size()); }
  // The text gzipped (readers that take BGZF take gzip too). Needs zlib.
  void write_gzip(const std::string& text) const {
    gzFile file = gzopen(path_.c_str(), "wb1");
    const bool written =
        file && gzwrite(file, text.data(), static_cast<unsigned>(text.size())) == static_cast<int>(text.size());
    if (!file || gzclose(file) != Z_OK || !(written || text.empty())) {
      std::fprintf(stderr, "tamis fuzz: cannot write the gzip input (disk full?)\n");
      std::abort();
    }
  }

 private:
  std::string path_;
};

// A broken promise of the code under test: stop so that libFuzzer keeps the input.
[[noreturn]] inline void report_broken_invariant(const char* what) {
  std::fprintf(stderr, "tamis fuzz: broken invariant: %s\n", what);
  std::abort();
}

// Values a diploid dosage may take after rounding (the decoder's own tolerance).
constexpr double kLargestDosage = 2.0 + 1e-4;

// Every dosage of the site is missing or in the range the decoder promises.
inline void check_site_dosages(const DosageBlock& block, std::size_t site_idx) {
  const VariantSite& site = block.sites[site_idx];
  if (site.allele_index < 1 || site.allele_index > site.alt_count) {
    report_broken_invariant("a site describes its record wrongly");
  }
  const double* dosages = block.site_dosages(site_idx);
  for (std::size_t sample_idx = 0; sample_idx < block.sample_count; ++sample_idx) {
    const double dosage = dosages[sample_idx];
    if (dosage != dosage) continue;  // missing
    // GT counts copies, so a polyploid call may exceed 2; DS and GP are
    // checked against the diploid range by the decoder.
    const bool above_range = site.source != DosageField::gt && dosage > kLargestDosage;
    if (dosage < 0.0 || std::isinf(dosage) || above_range) {
      report_broken_invariant("a dosage outside the range the decoder promises");
    }
  }
}

}  // namespace tamis::fuzzing
