// Output files written under "<final>.partial" and renamed only when complete,
// so a failed or interrupted run never leaves a file that looks finished.
#include <htslib/bgzf.h>
#include <htslib/hfile.h>
#include <htslib/hts.h>
#include <htslib/tbx.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <unordered_map>
#include <vector>

#include "output/temporary_registry.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {

namespace {

constexpr const char* space_fix =
    "check that the output directory exists, is writable and has free space "
    "(df -h), then run again";

std::string temporary_name_for(const std::string& final_path) { return final_path + ".partial"; }

std::string system_reason() {
  return errno != 0 ? std::string(" (") + std::strerror(errno) + ")" : std::string();
}

[[noreturn]] void throw_output_error(const std::string& path, const std::string& problem) {
  throw Error(ExitCode::output, path, problem, space_fix);
}

void rename_or_throw(const std::string& from, const std::string& to) {
  errno = 0;
  if (std::rename(from.c_str(), to.c_str()) != 0) {
    throw_output_error(to, "could not rename the finished file from " + from + system_reason());
  }
}

// A registered temporary name that is removed when this object goes away,
// unless it was released after a successful rename.
class TemporaryName {
 public:
  explicit TemporaryName(std::string path)
      : path_(std::move(path)), slot_(output_detail::register_temporary(path_)) {}
  ~TemporaryName() {
    if (!released_) unlink(path_.c_str());
    output_detail::unregister_temporary(slot_);
  }
  TemporaryName(const TemporaryName&) = delete;
  TemporaryName& operator=(const TemporaryName&) = delete;

  const std::string& path() const { return path_; }
  // The file stays registered for normal cleanup but no longer for signals.
  void keep_on_signal() {
    output_detail::unregister_temporary(slot_);
    slot_ = -1;
  }
  void release() {
    released_ = true;
    output_detail::unregister_temporary(slot_);
    slot_ = -1;
  }

 private:
  std::string path_;
  int slot_;
  bool released_ = false;
};

tbx_conf_t results_index_conf() {
  tbx_conf_t conf{};
  conf.preset = TBX_GENERIC;
  conf.sc = 1;  // chromosome
  conf.bc = 2;  // base_pair_location
  conf.ec = 0;  // a variant ends where it begins
  conf.meta_char = '#';
  conf.line_skip = 1;  // the header line
  return conf;
}

// Set rows span their set: chromosome, start and end in columns 2 to 4.
tbx_conf_t set_index_conf() {
  tbx_conf_t conf = results_index_conf();
  conf.sc = 2;
  conf.bc = 3;
  conf.ec = 4;
  return conf;
}

void build_index(const std::string& data_path, const std::string& index_path,
                 const std::string& final_path, IndexKind kind) {
  const tbx_conf_t conf = kind == IndexKind::tabix_vcf    ? tbx_conf_vcf
                          : kind == IndexKind::tabix_sets ? set_index_conf()
                                                          : results_index_conf();
  // min_shift 0 asks for a .tbi index.
  errno = 0;
  int status = tbx_index_build3(data_path.c_str(), index_path.c_str(), 0, 0, &conf);
  if (status != 0) {
    throw_output_error(final_path, "could not build the tabix index" + system_reason() +
                                       (status == -2 ? " (the data is not BGZF)" : ""));
  }
}

// The tabix index of a results file, built while its rows are written, as
// tbx_index_build3 would build it from the finished file (results_index_conf:
// one interval per row, from its position to the next base), so that
// committing need not read the file back. Contigs get ids in the order they
// first appear.
class RowIndex {
 public:
  explicit RowIndex(std::uint64_t data_start) : index_(hts_idx_init(0, HTS_FMT_TBI, data_start, 14, 5)) {}
  ~RowIndex() {
    if (index_) hts_idx_destroy(index_);
  }
  RowIndex(const RowIndex&) = delete;
  RowIndex& operator=(const RowIndex&) = delete;

  // The next row, `line` (without its newline), which starts at virtual
  // offset `start`. False for a row without a position, or out of order.
  // A row's end is taken as the next one's start (or the file's end): when
  // a block is flushed right after a row, that is where tabix, reading the
  // file, finds the row to end.
  bool add(std::string_view line, std::uint64_t start) {
    const std::size_t first_tab = line.find('\t');
    if (!index_ || first_tab == std::string_view::npos || !push_pending(start)) return false;
    const std::size_t second_tab = std::min(line.find('\t', first_tab + 1), line.size());
    std::int64_t position = 0;
    for (std::size_t at = first_tab + 1; at < second_tab; ++at) {
      if (line[at] < '0' || line[at] > '9') return false;
      position = position * 10 + (line[at] - '0');
    }
    if (position < 1) return false;
    const auto [found, added] = contig_ids_.emplace(std::string(line.substr(0, first_tab)), contig_ids_.size());
    if (added) contig_names_.push_back(found->first);
    pending_ = Row{static_cast<int>(found->second), position - 1};
    return true;
  }

  bool save(const std::string& data_path, const std::string& index_path, std::uint64_t end) {
    if (!index_ || !push_pending(end) || hts_idx_finish(index_, end) != 0) return false;
    std::vector<std::uint8_t> meta = tabix_meta();
    if (hts_idx_set_meta(index_, static_cast<std::uint32_t>(meta.size()), meta.data(), 1) != 0) return false;
    return hts_idx_save_as(index_, data_path.c_str(), index_path.c_str(), HTS_FMT_TBI) == 0;
  }

 private:
  // The .tbi header after its magic (SAMv1 tabix specification, 5.2): the
  // six configuration integers, the length of the names, then the contig
  // names, each ending in a NUL.
  std::vector<std::uint8_t> tabix_meta() const {
    const tbx_conf_t conf = results_index_conf();
    std::string names;
    for (const std::string& name : contig_names_) names.append(name).push_back('\0');
    const std::int32_t fields[7] = {conf.preset, conf.sc, conf.bc, conf.ec, conf.meta_char, conf.line_skip,
                                    static_cast<std::int32_t>(names.size())};
    std::vector<std::uint8_t> meta(sizeof fields + names.size());
    for (std::size_t field = 0; field < 7; ++field) {
      for (std::size_t byte = 0; byte < 4; ++byte) {
        meta[field * 4 + byte] = static_cast<std::uint8_t>(static_cast<std::uint32_t>(fields[field]) >> (8 * byte));
      }
    }
    std::memcpy(meta.data() + sizeof fields, names.data(), names.size());
    return meta;
  }

  struct Row {
    int contig = -1;
    std::int64_t begin = 0;  // 0-based; the interval is one base
  };

  bool push_pending(std::uint64_t end) {
    if (pending_.contig < 0) return true;
    const bool pushed = hts_idx_push(index_, pending_.contig, pending_.begin, pending_.begin + 1, end, 1) == 0;
    pending_ = Row{};
    return pushed;
  }

  hts_idx_t* index_;
  Row pending_;
  std::unordered_map<std::string, std::size_t> contig_ids_;
  std::vector<std::string> contig_names_;
};

}  // namespace

// ---- BgzfTextFile ----------------------------------------------------------

struct BgzfTextFile::Impl {
  explicit Impl(const std::string& temporary_path) : data(temporary_path) {}
  TemporaryName data;
  BGZF* handle = nullptr;
  bool committed = false;
  // Rows written through write_rows into a file this run began: their index
  // so far. Null once anything else is written after them, or for a resumed
  // file, whose earlier rows were never seen; commit then reads the file.
  std::unique_ptr<RowIndex> row_index;
  bool rows_indexable = true;

  void close_quietly() {
    if (handle) bgzf_close(handle);
    handle = nullptr;
  }
};

// Deflate level 1: results files come out 14% larger than at the default
// level 6 (7% larger than at level 2), and compressing them takes a quarter
// of the time; at level 6 it was a tenth of a whole BCF scan. Appending
// after a resume uses the same level, so a resumed file is byte-identical to
// an uninterrupted one.
constexpr const char* kBgzfWriteMode = "w1";
constexpr const char* kBgzfAppendMode = "a1";

BgzfTextFile::BgzfTextFile(std::string final_path)
    : final_path_(std::move(final_path)), temporary_path_(temporary_name_for(final_path_)) {
  impl_ = std::make_unique<Impl>(temporary_path_);
  errno = 0;
  impl_->handle = bgzf_open(temporary_path_.c_str(), kBgzfWriteMode);
  if (!impl_->handle) {
    throw_output_error(final_path_, "could not create the temporary file " + temporary_path_ +
                                        system_reason());
  }
}

BgzfTextFile::BgzfTextFile(std::string final_path, std::uint64_t compressed_bytes, ResumeTag)
    : final_path_(std::move(final_path)), temporary_path_(temporary_name_for(final_path_)) {
  struct stat info;
  if (stat(temporary_path_.c_str(), &info) != 0 || static_cast<std::uint64_t>(info.st_size) < compressed_bytes) {
    throw Error(ExitCode::usage, temporary_path_,
                "the interrupted run's partial results are missing or shorter than its checkpoint",
                "run the scan again without --resume");
  }
  errno = 0;
  if (truncate(temporary_path_.c_str(), static_cast<off_t>(compressed_bytes)) != 0) {
    throw_output_error(final_path_, "could not cut the partial results back to the checkpoint" + system_reason());
  }
  impl_ = std::make_unique<Impl>(temporary_path_);
  impl_->rows_indexable = false;
  impl_->handle = bgzf_open(temporary_path_.c_str(), kBgzfAppendMode);
  if (!impl_->handle) {
    throw_output_error(final_path_, "could not reopen the temporary file " + temporary_path_ + system_reason());
  }
}

std::unique_ptr<BgzfTextFile> BgzfTextFile::resume(std::string final_path, std::uint64_t compressed_bytes) {
  return std::make_unique<BgzfTextFile>(std::move(final_path), compressed_bytes, ResumeTag{});
}

std::uint64_t BgzfTextFile::checkpoint() {
  if (!impl_->handle) throw_output_error(final_path_, "checkpoint after the file was closed");
  errno = 0;
  if (bgzf_flush(impl_->handle) != 0 || hflush(impl_->handle->fp) != 0) {
    throw_output_error(final_path_, "writing the results failed" + system_reason());
  }
  // After a flush the virtual offset's low 16 bits are zero and the high bits
  // give the compressed size written so far.
  return static_cast<std::uint64_t>(bgzf_tell(impl_->handle)) >> 16;
}

void BgzfTextFile::keep_on_interrupt() { impl_->data.keep_on_signal(); }

BgzfTextFile::~BgzfTextFile() {
  if (impl_) impl_->close_quietly();
}

void BgzfTextFile::write(std::string_view text) {
  if (!impl_->handle) throw_output_error(final_path_, "write after the file was closed");
  if (impl_->row_index) {
    impl_->row_index.reset();
    impl_->rows_indexable = false;
  }
  write_bytes(text);
}

void BgzfTextFile::write_rows(std::string_view rows) {
  if (!impl_->handle) throw_output_error(final_path_, "write after the file was closed");
  if (impl_->rows_indexable && !impl_->row_index) {
    impl_->row_index = std::make_unique<RowIndex>(static_cast<std::uint64_t>(bgzf_tell(impl_->handle)));
  }
  std::size_t start = 0;
  while (start < rows.size()) {
    const std::size_t end = std::min(rows.find('\n', start), rows.size() - 1) + 1;
    const std::string_view line = rows.substr(start, end - start);
    if (impl_->row_index && !impl_->row_index->add(line.substr(0, line.size() - (line.back() == '\n')),
                                                  static_cast<std::uint64_t>(bgzf_tell(impl_->handle)))) {
      impl_->row_index.reset();
      impl_->rows_indexable = false;
    }
    write_bytes(line);
    start = end;
  }
}

bool BgzfTextFile::indexes_rows() const { return impl_->row_index != nullptr; }

void BgzfTextFile::write_bytes(std::string_view text) {
  errno = 0;
  ssize_t written = bgzf_write(impl_->handle, text.data(), text.size());
  if (written < 0 || static_cast<std::size_t>(written) < text.size()) {
    std::string reason = system_reason();
    impl_->close_quietly();
    unlink(temporary_path_.c_str());
    throw_output_error(final_path_, "writing the results failed" + reason);
  }
}

void BgzfTextFile::commit(IndexKind index) {
  if (!impl_->handle) throw_output_error(final_path_, "commit after the file was closed");
  errno = 0;
  // The index ends where the end-of-file block will begin, as it does when
  // tabix reads the finished file.
  std::unique_ptr<RowIndex> row_index = index == IndexKind::tabix_results ? std::move(impl_->row_index) : nullptr;
  std::uint64_t data_end = 0;
  if (row_index) {
    if (bgzf_flush(impl_->handle) != 0) row_index.reset();
    data_end = static_cast<std::uint64_t>(bgzf_tell(impl_->handle));
  }
  int close_status = bgzf_close(impl_->handle);
  impl_->handle = nullptr;
  if (close_status != 0) {
    std::string reason = system_reason();
    unlink(temporary_path_.c_str());
    throw_output_error(final_path_, "finishing the compressed file failed" + reason);
  }
  const std::string final_index = final_path_ + ".tbi";
  if (index == IndexKind::none) {
    // An index left from an earlier run would describe the old data.
    unlink(final_index.c_str());
  } else {
    TemporaryName index_file(temporary_path_ + ".tbi");
    if (!row_index || !row_index->save(final_path_, index_file.path(), data_end)) {
      build_index(temporary_path_, index_file.path(), final_path_, index);
    }
    rename_or_throw(index_file.path(), final_index);
    index_file.release();
  }
  rename_or_throw(temporary_path_, final_path_);
  impl_->data.release();
  impl_->committed = true;
}

// ---- PlainTextFile ---------------------------------------------------------

struct PlainTextFile::Impl {
  explicit Impl(const std::string& temporary_path) : data(temporary_path) {}
  TemporaryName data;
  std::FILE* handle = nullptr;

  void close_quietly() {
    if (handle) std::fclose(handle);
    handle = nullptr;
  }
};

PlainTextFile::PlainTextFile(std::string final_path)
    : final_path_(std::move(final_path)), temporary_path_(temporary_name_for(final_path_)) {
  impl_ = std::make_unique<Impl>(temporary_path_);
  errno = 0;
  impl_->handle = std::fopen(temporary_path_.c_str(), "wb");
  if (!impl_->handle) {
    throw_output_error(final_path_, "could not create the temporary file " + temporary_path_ +
                                        system_reason());
  }
}

PlainTextFile::~PlainTextFile() {
  if (impl_) impl_->close_quietly();
}

void PlainTextFile::write(std::string_view text) {
  if (!impl_->handle) throw_output_error(final_path_, "write after the file was closed");
  errno = 0;
  if (std::fwrite(text.data(), 1, text.size(), impl_->handle) != text.size()) {
    std::string reason = system_reason();
    impl_->close_quietly();
    unlink(temporary_path_.c_str());
    throw_output_error(final_path_, "writing failed" + reason);
  }
}

void PlainTextFile::commit() {
  if (!impl_->handle) throw_output_error(final_path_, "commit after the file was closed");
  errno = 0;
  bool flushed = std::fflush(impl_->handle) == 0 && std::ferror(impl_->handle) == 0;
  std::string reason = system_reason();
  errno = 0;
  bool closed = std::fclose(impl_->handle) == 0;
  if (reason.empty()) reason = system_reason();
  impl_->handle = nullptr;
  if (!flushed || !closed) {
    unlink(temporary_path_.c_str());
    throw_output_error(final_path_, "finishing the file failed" + reason);
  }
  rename_or_throw(temporary_path_, final_path_);
  impl_->data.release();
}

// ---- checks and checksums --------------------------------------------------

void check_output_prefix_writable(const std::string& prefix) {
  std::string directory = ".";
  std::size_t slash = prefix.find_last_of('/');
  if (slash == 0) {
    directory = "/";
  } else if (slash != std::string::npos) {
    directory = prefix.substr(0, slash);
  }
  const std::string fix = "create the directory " + directory +
                          " or choose an output prefix in a directory you can write to";
  struct stat info;
  if (stat(directory.c_str(), &info) != 0) {
    throw Error(ExitCode::output, prefix, "the output directory " + directory + " does not exist",
                fix);
  }
  if (!S_ISDIR(info.st_mode)) {
    throw Error(ExitCode::output, prefix, directory + " is not a directory", fix);
  }
  std::string probe = directory + "/.tamis-write-probe-XXXXXX";
  errno = 0;
  int descriptor = mkstemp(probe.data());
  if (descriptor < 0) {
    throw Error(ExitCode::output, prefix,
                "cannot create files in the output directory " + directory + system_reason(), fix);
  }
  close(descriptor);
  unlink(probe.c_str());
}

std::string md5_hex_of_file(const std::string& path) {
  std::FILE* input = std::fopen(path.c_str(), "rb");
  if (!input) {
    throw Error(ExitCode::output, path, "cannot read the file to compute its md5" + system_reason(),
                "check that the file was written and is readable");
  }
  hts_md5_context* context = hts_md5_init();
  if (!context) {
    std::fclose(input);
    throw Error(ExitCode::internal, path, "could not start an md5 computation");
  }
  char buffer[1 << 16];
  std::size_t got;
  while ((got = std::fread(buffer, 1, sizeof buffer, input)) > 0) {
    hts_md5_update(context, buffer, got);
  }
  bool read_failed = std::ferror(input) != 0;
  std::fclose(input);
  unsigned char digest[16];
  hts_md5_final(digest, context);
  hts_md5_destroy(context);
  if (read_failed) {
    throw Error(ExitCode::output, path, "reading the file for its md5 failed",
                "check the disk and run again");
  }
  char hex[33];
  hts_md5_hex(hex, digest);
  return std::string(hex, 32);
}

}  // namespace tamis
