// Streaming VCF / VCF.gz / BCF reading. Records are read serially here and
// decoded later (record_decoding.cpp, fast_vcf.cpp), possibly on several
// threads at once. BCF records are read with bcf_read; VCF records stay raw
// lines of text (hts_getline, BGZF decompressed by htslib's thread pool), so
// that their parsing happens in the parallel decoding stage. With regions,
// each file is read through its index, one region after the other.
#include "tamis/genotype_reader.hpp"

#include <htslib/bgzf.h>
#include <htslib/hts.h>
#include <htslib/kseq.h>
#include <htslib/tbx.h>
#include <htslib/vcf.h>
#include <sys/stat.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <mutex>
#include <string_view>
#include <unordered_map>
#include <utility>

#include "genotypes/bcf_records.hpp"
#include "genotypes/bgzf_prefetch.hpp"
#include "genotypes/fast_vcf.hpp"
#include "genotypes/genotype_index.hpp"
#include "genotypes/record_batch_impl.hpp"
#include "tamis/errors.hpp"

namespace tamis {

const char* dosage_field_name(DosageField field) {
  switch (field) {
    case DosageField::automatic: return "auto";
    case DosageField::ds: return "DS";
    case DosageField::gp: return "GP";
    case DosageField::gt: return "GT";
  }
  return "?";
}

namespace {

constexpr const char* damaged_file_fix =
    "the file looks truncated or damaged: check it with `bgzip -t` (compressed VCF) or "
    "`bcftools view` and download or copy it again";

[[noreturn]] void throw_input_error(const std::string& where, const std::string& what,
                                    const std::string& fix) {
  throw Error(ExitCode::genotype_input, where, what, fix);
}

std::string system_reason() {
  return errno != 0 ? std::string(" (") + std::strerror(errno) + ")" : std::string();
}

// Only a regular file can be opened a second time at the records' start; a
// pipe, a device or a URL is read through the one htslib handle.
bool is_regular_file(const std::string& path) {
  struct stat info;
  return stat(path.c_str(), &info) == 0 && S_ISREG(info.st_mode);
}

std::vector<std::string> split_on(const std::string& text, char separator) {
  std::vector<std::string> parts;
  std::size_t start = 0;
  while (true) {
    std::size_t end = text.find(separator, start);
    parts.push_back(text.substr(start, end == std::string::npos ? std::string::npos : end - start));
    if (end == std::string::npos) break;
    start = end + 1;
  }
  return parts;
}

// The raw header text, read without htslib's header parser, which refuses
// some headers (duplicate sample names) without saying where the problem is.
// The handle is owned so that a throw on the way (an allocation for a damaged
// length) still closes the file.
std::string read_raw_header_text(const std::string& path) {
  const genotype_detail::HtsFilePtr owned(hts_open(path.c_str(), "r"));
  if (!owned) return "";
  htsFile* file = owned.get();
  std::string text;
  const htsFormat* format = hts_get_format(file);
  if (format->format == vcf) {
    kstring_t line = {0, 0, nullptr};
    while (hts_getline(file, KS_SEP_LINE, &line) >= 0 && line.l > 0 && line.s[0] == '#') {
      text.append(line.s, line.l);
      text += '\n';
    }
    free(line.s);
  } else if (format->format == bcf && file->is_bgzf) {
    // BCF: "BCF\2\2", a little-endian 32-bit text length, then the text.
    uint8_t prefix[9];
    if (bgzf_read(file->fp.bgzf, prefix, sizeof prefix) == sizeof prefix) {
      uint32_t length = le_to_u32(prefix + 5);
      // A damaged length would have us allocate up to 4 GiB; no real header
      // comes near 256 MiB, and htslib's own parser then reports the damage.
      constexpr uint32_t kLongestHeader = uint32_t{1} << 28;
      if (length > kLongestHeader) return "";
      std::string buffer(length, '\0');
      if (bgzf_read(file->fp.bgzf, buffer.data(), length) == static_cast<ssize_t>(length)) {
        text = buffer.c_str();
      }
    }
  }
  return text;
}

std::vector<std::string> sample_names_in_raw_header(const std::string& header_text) {
  for (const std::string& line : split_on(header_text, '\n')) {
    if (line.rfind("#CHROM", 0) != 0) continue;
    std::vector<std::string> columns = split_on(line, '\t');
    // Eight fixed columns and FORMAT come before the samples (VCF 4.3, 1.5).
    if (columns.size() <= 9) return {};
    return std::vector<std::string>(columns.begin() + 9, columns.end());
  }
  return {};
}

void check_no_duplicate_samples(const std::string& path, const std::vector<std::string>& samples) {
  std::unordered_map<std::string, std::size_t> first_position;
  for (std::size_t sample_idx = 0; sample_idx < samples.size(); ++sample_idx) {
    auto [found, inserted] = first_position.emplace(samples[sample_idx], sample_idx);
    if (inserted) continue;
    throw_input_error(path + ", header",
                      "sample ID '" + samples[sample_idx] + "' appears twice, as sample " +
                          std::to_string(found->second + 1) + " and sample " +
                          std::to_string(sample_idx + 1) + " of the #CHROM line",
                      "give every sample a distinct ID, e.g. with `bcftools reheader -s`");
  }
}

std::vector<std::string> declared_format_fields(const bcf_hdr_t* header) {
  std::vector<std::string> fields;
  for (int hrec_idx = 0; hrec_idx < header->nhrec; ++hrec_idx) {
    const bcf_hrec_t* hrec = header->hrec[hrec_idx];
    if (hrec->type != BCF_HL_FMT) continue;
    int key_idx = bcf_hrec_find_key(const_cast<bcf_hrec_t*>(hrec), "ID");
    if (key_idx >= 0) fields.emplace_back(hrec->vals[key_idx]);
  }
  return fields;
}

std::string join_fields(const std::vector<std::string>& fields) {
  if (fields.empty()) return "none";
  std::string text;
  for (const std::string& field : fields) text += (text.empty() ? "" : ", ") + field;
  return text;
}

int format_tag_id(const bcf_hdr_t* header, const char* tag) {
  int tag_id = bcf_hdr_id2int(header, BCF_DT_ID, tag);
  if (tag_id < 0 || !bcf_hdr_idinfo_exists(header, BCF_HL_FMT, tag_id)) return -1;
  return tag_id;
}

DosageField resolve_field(const std::string& path, const bcf_hdr_t* header, DosageField wanted) {
  const std::string declared = join_fields(declared_format_fields(header));
  if (wanted == DosageField::automatic) {
    for (DosageField candidate : {DosageField::ds, DosageField::gp, DosageField::gt}) {
      if (format_tag_id(header, dosage_field_name(candidate)) >= 0) return candidate;
    }
    throw_input_error(path + ", header",
                      "the header declares none of the FORMAT fields DS, GP or GT (it declares: " +
                          declared + ")",
                      "provide genotypes (GT), dosages (DS) or genotype probabilities (GP)");
  }
  if (format_tag_id(header, dosage_field_name(wanted)) < 0) {
    throw_input_error(path + ", header",
                      std::string("the requested dosage field FORMAT/") + dosage_field_name(wanted) +
                          " is not declared in the header (it declares: " + declared + ")",
                      "request one of the declared fields, or let tamis choose (auto)");
  }
  return wanted;
}

void check_field_type(const std::string& path, const bcf_hdr_t* header, DosageField field,
                      int tag_id) {
  const int type = bcf_hdr_id2type(header, BCF_HL_FMT, tag_id);
  const bool wanted_type = field == DosageField::gt ? type == BCF_HT_STR : type == BCF_HT_REAL;
  if (wanted_type) return;
  throw_input_error(path + ", header",
                    std::string("FORMAT/") + dosage_field_name(field) + " is declared with Type=" +
                        (type == BCF_HT_INT ? "Integer" : type == BCF_HT_STR ? "String" : "Flag") +
                        ", expected Type=" + (field == DosageField::gt ? "String" : "Float") +
                        " (VCF 4.3, section 1.6.2)",
                    "fix the ##FORMAT line, e.g. with `bcftools reheader -h`");
}

std::string describe_sample_mismatch(const std::vector<std::string>& expected,
                                     const std::vector<std::string>& found) {
  const std::size_t shared = std::min(expected.size(), found.size());
  for (std::size_t sample_idx = 0; sample_idx < shared; ++sample_idx) {
    if (expected[sample_idx] == found[sample_idx]) continue;
    return "sample " + std::to_string(sample_idx + 1) + " is '" + found[sample_idx] +
           "' where the first file has '" + expected[sample_idx] + "'";
  }
  return "it lists " + std::to_string(found.size()) + " samples where the first file lists " +
         std::to_string(expected.size());
}

struct InputFile {
  std::shared_ptr<genotype_detail::FileInfo> info;
  htsFile* handle = nullptr;
  bcf_hdr_t* header = nullptr;
  std::uint64_t records_read = 0;
  std::string last_place;  // chrom:pos of the last record read
  // Reading through regions: the index, the next region to visit and the
  // iterator over the current one. `line` receives a VCF.gz record's text.
  std::unique_ptr<genotype_detail::FileIndex> index;
  std::size_t next_region = 0;
  const GenomicRegion* current_region = nullptr;
  genotype_detail::IteratorPtr iterator;
  kstring_t line = {0, 0, nullptr};
  // A BCF file read whole is read through a prefetched stream (opened when
  // reading reaches the file), from the records' start after the header.
  bool prefetches = false;
  bool prefetch_done = false;  // its records are all read: never opened again
  std::int64_t records_start = 0;
  std::shared_ptr<genotype_detail::PrefetchedBgzf> stream;

  InputFile() = default;
  InputFile(const InputFile&) = delete;
  InputFile& operator=(const InputFile&) = delete;
  ~InputFile() {
    iterator.reset();
    index.reset();
    free(line.s);
    if (header) bcf_hdr_destroy(header);
    if (handle) hts_close(handle);
  }
};

std::string record_where(const InputFile& input, std::uint64_t record_number,
                         const std::string& place) {
  std::string where = input.info->path + ", record " + std::to_string(record_number);
  if (!place.empty()) where += " (" + place + ")";
  return where;
}

// Reading stops only on damaged or cut-short data: VCF text is parsed later,
// when the batch is decoded, and BCF records need no parsing.
[[noreturn]] void throw_read_error(const InputFile& input, std::uint64_t record_number) {
  const std::string place =
      "after " + (input.last_place.empty() ? std::string("the header") : input.last_place);
  throw_input_error(record_where(input, record_number, place),
                    "reading failed: the data is damaged or cut short", damaged_file_fix);
}

// The first `count` tab-separated columns of a line, as far as they exist.
std::vector<std::string_view> leading_columns(const kstring_t& line, int count) {
  std::vector<std::string_view> columns;
  const std::string_view text(line.s ? line.s : "", line.l);
  std::size_t start = 0;
  while (static_cast<int>(columns.size()) < count && start <= text.size()) {
    const std::size_t tab = std::min(text.find('\t', start), text.size());
    columns.push_back(text.substr(start, tab - start));
    start = tab + 1;
  }
  return columns;
}

// POS of a VCF line, or nothing when it is not a plain number (the decoder
// reports such a line).
std::optional<std::int64_t> position_in_line(const kstring_t& line) {
  const std::vector<std::string_view> columns = leading_columns(line, 2);
  if (columns.size() < 2 || columns[1].empty() || columns[1].size() > 18) return std::nullopt;
  std::int64_t position = 0;
  for (char letter : columns[1]) {
    if (letter < '0' || letter > '9') return std::nullopt;
    position = position * 10 + (letter - '0');
  }
  return position;
}

}  // namespace

struct GenotypeReader::Impl {
  std::vector<std::string> paths;
  std::vector<std::unique_ptr<InputFile>> inputs;
  std::shared_ptr<std::vector<std::string>> sample_ids = std::make_shared<std::vector<std::string>>();
  std::size_t current_input = 0;
  bool reads_regions = false;
  std::vector<GenomicRegion> regions;  // merged; may be empty even when reads_regions
  // The stream being read, shared with threads that inflate ahead of it.
  std::mutex active_mutex;
  std::shared_ptr<genotype_detail::PrefetchedBgzf> active_stream;

  std::unique_ptr<InputFile> open_input(const std::string& path, const GenotypeReaderOptions& options);
  void read_header(InputFile& input);
  void check_samples_match(const InputFile& input, std::vector<std::string> samples);
  bool start_next_region(InputFile& input);
  int read_record_in_regions(InputFile& input, bcf1_t* record);
  int read_line_in_regions(InputFile& input, kstring_t& line);
  int read_line(InputFile& input, kstring_t& line);
  int read_prefetched_record(InputFile& input, bcf1_t* record);
  void set_active_stream(std::shared_ptr<genotype_detail::PrefetchedBgzf> stream);
  bool read_next(InputFile& input, RecordBatch::Impl& records);
};

namespace {

void check_haploid_dosage(int haploid_dosage) {
  if (haploid_dosage == 1 || haploid_dosage == 2) return;
  throw Error(ExitCode::usage, "",
              "the dosage of a haploid call must be 1 or 2, not " + std::to_string(haploid_dosage),
              "use 1 to count alleles, or 2 to weigh a haploid call like a homozygous diploid one");
}

}  // namespace

// Moves on to the next region that the file may hold records of; false
// once every region is done.
bool GenotypeReader::Impl::start_next_region(InputFile& input) {
  while (!input.iterator) {
    if (input.next_region >= regions.size()) return false;
    input.current_region = &regions[input.next_region++];
    const int tid = input.index->contig_id(input.current_region->contig);
    // A contig this file lacks gives no iterator: nothing to read here.
    input.iterator =
        input.index->query(tid, input.current_region->first - 1, input.current_region->last);
  }
  return true;
}

bool holds_position(const GenomicRegion& region, std::int64_t position) {
  return position >= region.first && position <= region.last;
}

// Like bcf_read: 0 for a record, -1 once every region is done, below -1 for
// an error. Only records whose POS lies in the current region count: the
// index iterator also yields records that start earlier and reach into it.
int GenotypeReader::Impl::read_record_in_regions(InputFile& input, bcf1_t* record) {
  while (start_next_region(input)) {
    const int status = bcf_itr_next(input.handle, input.iterator.get(), record);
    if (status == -1) {
      input.iterator.reset();
      continue;
    }
    if (status < -1) return status;
    if (holds_position(*input.current_region, record->pos + 1)) return 0;
  }
  return -1;
}

// The same for VCF.gz lines, which stay text: POS is read off the line.
int GenotypeReader::Impl::read_line_in_regions(InputFile& input, kstring_t& line) {
  while (start_next_region(input)) {
    const int status = tbx_itr_next(input.handle, input.index->tabix(), input.iterator.get(), &input.line);
    if (status == -1) {
      input.iterator.reset();
      continue;
    }
    if (status < -1) return status;
    const std::optional<std::int64_t> position = position_in_line(input.line);
    if (position && !holds_position(*input.current_region, *position)) continue;
    std::swap(line, input.line);  // hand the text over without copying it
    return 0;
  }
  return -1;
}

bool has_damage(const InputFile& input) {
  return hts_get_format(input.handle)->compression != no_compression &&
         input.handle->fp.bgzf->errcode != 0;
}

// Like hts_getline: 0 for a line, -1 at the end, below -1 for an error. A
// damaged block can end a line early without failing the read itself; BGZF
// remembers the failure, so a line read once it has is not trusted. (With
// decompression threads BGZF learns of the damage a few blocks ahead, and
// stops there, so the record named may come a little before the damage.)
int GenotypeReader::Impl::read_line(InputFile& input, kstring_t& line) {
  const int status = reads_regions ? read_line_in_regions(input, line)
                                   : std::min(hts_getline(input.handle, KS_SEP_LINE, &line), 0);
  return has_damage(input) ? -2 : status;
}

std::unique_ptr<InputFile> GenotypeReader::Impl::open_input(const std::string& path,
                                                            const GenotypeReaderOptions& options) {
  auto input = std::make_unique<InputFile>();
  errno = 0;
  input->handle = hts_open(path.c_str(), "r");
  if (!input->handle) {
    throw_input_error(path, "cannot open the genotype file" + system_reason(),
                      "check the path and that the file is readable");
  }
  const htsFormat* format = hts_get_format(input->handle);
  if (format->format != vcf && format->format != bcf) {
    char* description = hts_format_description(format);
    std::string detected = description ? description : "unknown";
    free(description);
    throw_input_error(path, "not a VCF or BCF file (htslib sees: " + detected + ")",
                      "give a VCF, bgzip-compressed VCF or BCF file");
  }
  // Plain gzip has no end-of-file marker; BGZF does, and a missing one means
  // the copy stopped early.
  if (format->compression == bgzf && bgzf_check_EOF(input->handle->fp.bgzf) == 0) {
    throw_input_error(path, "the BGZF end-of-file marker is missing, so the file is incomplete",
                      damaged_file_fix);
  }
  // BCF read whole is inflated by the scan's own threads (inflate_ahead);
  // htslib's threads serve compressed VCF and reading through an index.
  input->prefetches = format->format == bcf && format->compression == bgzf && options.regions.empty() &&
                      is_regular_file(path);
  if (options.io_threads > 0 && !input->prefetches && hts_set_threads(input->handle, options.io_threads) != 0) {
    throw_input_error(path, "could not start " + std::to_string(options.io_threads) +
                                " decompression threads",
                      "use fewer input/output threads");
  }
  auto info = std::make_shared<genotype_detail::FileInfo>();
  info->path = path;
  info->file_index = inputs.size();
  info->sample_ids = sample_ids;
  input->info = info;
  read_header(*input);
  if (input->prefetches) input->records_start = bgzf_tell(input->handle->fp.bgzf);
  info->field = resolve_field(path, input->header, options.field);
  info->tag_id = format_tag_id(input->header, dosage_field_name(info->field));
  check_field_type(path, input->header, info->field, info->tag_id);
  info->gt_tag_id = format_tag_id(input->header, "GT");
  info->haploid_dosage = options.haploid_dosage;
  if (format->format == vcf) {
    // VCF records are kept as text by the reader and parsed in parallel.
    info->text_decoder = std::make_shared<genotype_detail::VcfTextDecoder>(
        input->header, info->field, options.haploid_dosage);
  }
  if (!options.regions.empty()) {
    input->index = genotype_detail::FileIndex::load(path, input->handle, input->header);
    if (!input->index) genotype_detail::throw_missing_index(path, input->handle, "reading regions");
  }
  return input;
}

void GenotypeReader::Impl::read_header(InputFile& input) {
  const std::string& path = input.info->path;
  input.header = bcf_hdr_read(input.handle);
  if (!input.header) {
    // htslib rejects duplicate sample names without saying which; look for them.
    check_no_duplicate_samples(path, sample_names_in_raw_header(read_raw_header_text(path)));
    throw_input_error(path + ", header", "htslib could not parse the VCF header",
                      "check the ## lines and the #CHROM line, e.g. with `bcftools view -h`");
  }
  const int sample_count = bcf_hdr_nsamples(input.header);
  std::vector<std::string> samples(input.header->samples, input.header->samples + sample_count);
  check_no_duplicate_samples(path, samples);
  check_samples_match(input, std::move(samples));
}

void GenotypeReader::Impl::check_samples_match(const InputFile& input,
                                               std::vector<std::string> samples) {
  if (inputs.empty()) {
    *sample_ids = std::move(samples);
    return;
  }
  if (samples == *sample_ids) return;
  throw_input_error(input.info->path + ", header",
                    "the samples differ from those of the first file " + paths.front() + ": " +
                        describe_sample_mismatch(*sample_ids, samples),
                    "give files that list the same samples in the same order "
                    "(e.g. `bcftools view -s` with one sample list for every file)");
}

GenotypeReader::GenotypeReader(const GenotypeReaderOptions& options) : impl_(std::make_unique<Impl>()) {
  check_haploid_dosage(options.haploid_dosage);
  impl_->paths = options.paths;
  impl_->reads_regions = !options.regions.empty();
  impl_->regions = genotype_detail::merge_regions(options.regions);
  for (const std::string& path : options.paths) {
    impl_->inputs.push_back(impl_->open_input(path, options));
  }
}

GenotypeReader::~GenotypeReader() = default;

const std::vector<std::string>& GenotypeReader::sample_ids() const { return *impl_->sample_ids; }

const std::vector<std::string>& GenotypeReader::paths() const { return impl_->paths; }

DosageField GenotypeReader::resolved_field(std::size_t file_index) const {
  return impl_->inputs.at(file_index)->info->field;
}

std::optional<std::uint64_t> GenotypeReader::indexed_record_count() const {
  if (impl_->inputs.empty() || impl_->reads_regions) return std::nullopt;
  std::uint64_t total = 0;
  for (const auto& input : impl_->inputs) {
    auto index = genotype_detail::FileIndex::load(input->info->path, input->handle, input->header);
    if (!index) return std::nullopt;
    std::optional<std::uint64_t> count = index->total_records();
    if (!count) return std::nullopt;
    total += *count;
  }
  return total;
}

void GenotypeReader::Impl::set_active_stream(std::shared_ptr<genotype_detail::PrefetchedBgzf> stream) {
  const std::lock_guard<std::mutex> lock(active_mutex);
  active_stream = std::move(stream);
}

// Like bcf_read. The stream is opened at the file's first record and let go
// at its end, so that only one file's chunks are held at a time.
int GenotypeReader::Impl::read_prefetched_record(InputFile& input, bcf1_t* record) {
  if (input.prefetch_done) return -1;
  if (!input.stream) {
    errno = 0;
    input.stream = genotype_detail::PrefetchedBgzf::open(input.info->path, input.records_start);
    if (!input.stream) {
      throw_input_error(input.info->path, "cannot open the genotype file again to read its records" + system_reason(),
                        "check that the file is still readable");
    }
    set_active_stream(input.stream);
  }
  const int status = genotype_detail::read_bcf_record(*input.stream, input.header, record);
  if (status == -1) {
    set_active_stream(nullptr);
    input.stream.reset();
    input.prefetch_done = true;
  }
  return status;
}

bool GenotypeReader::inflate_ahead() {
  std::shared_ptr<genotype_detail::PrefetchedBgzf> stream;
  {
    const std::lock_guard<std::mutex> lock(impl_->active_mutex);
    stream = impl_->active_stream;
  }
  return stream && stream->help();
}

// Reads the input's next record into slot records.count; false at its end.
bool GenotypeReader::Impl::read_next(InputFile& input, RecordBatch::Impl& records) {
  const std::size_t slot = records.count;
  const std::uint64_t record_number = input.records_read + 1;
  genotype_detail::RecordOrigin& origin = records.origins[slot];
  std::string position_text;
  if (input.info->text_decoder) {
    kstring_t& line = records.lines[slot];
    const int status = read_line(input, line);
    if (status < -1) throw_read_error(input, record_number);
    if (status == -1) return false;
    const std::vector<std::string_view> columns = leading_columns(line, 2);
    origin.chromosome.assign(columns[0].data(), columns[0].size());
    if (columns.size() > 1) position_text.assign(columns[1].data(), columns[1].size());
  } else {
    bcf1_t* record = records.record_at(slot);
    const int status = input.prefetches ? read_prefetched_record(input, record)
                       : reads_regions  ? read_record_in_regions(input, record)
                                        : bcf_read(input.handle, input.header, record);
    if (status == -1) return false;
    // Undefined contigs and tags are only warnings: htslib adds them to the header.
    const int fatal_errors = record->errcode & ~(BCF_ERR_CTG_UNDEF | BCF_ERR_TAG_UNDEF);
    if (status < -1 || fatal_errors != 0) throw_read_error(input, record_number);
    // Copied now: htslib may grow the header's contig list while later
    // records are read, and decoding must not look into a changing header.
    origin.chromosome = bcf_seqname_safe(input.header, record);
    position_text = std::to_string(record->pos + 1);
  }
  input.records_read = record_number;
  origin.file = input.info;
  origin.record_number = record_number;
  input.last_place = origin.chromosome + ":" + position_text;
  return true;
}

std::size_t GenotypeReader::read_batch(RecordBatch& batch, std::size_t max_records) {
  if (!batch.impl_) batch.impl_ = std::make_unique<RecordBatch::Impl>();
  RecordBatch::Impl& records = *batch.impl_;
  records.reserve(max_records);
  records.count = 0;
  records.sample_count = impl_->sample_ids->size();

  while (records.count < max_records && impl_->current_input < impl_->inputs.size()) {
    InputFile& input = *impl_->inputs[impl_->current_input];
    if (!impl_->read_next(input, records)) {
      ++impl_->current_input;
      continue;
    }
    ++records.count;
  }
  return records.count;
}

}  // namespace tamis
