// BCF read whole without htslib's bcf_read: the prefetched BGZF stream
// (src/genotypes/bgzf_prefetch.hpp) and the record reader on top of it
// (src/genotypes/bcf_records.hpp), checked against outside references:
//   - records: htslib 1.16 hts_open + bcf_hdr_read + bcf_read on the same file;
//   - the inflated bytes: `bgzip -dc` of bgzip (tabix / htslib) 1.16;
//   - BCF files are made by bcftools 1.16 `view -Ob`, and files with small
//     blocks by htslib 1.16 bgzf_write + bgzf_flush;
//   - damage and malformed records: the BGZF layout of SAMv1 section 4.1 and
//     the BCF 2.2 record layout of hts-specs VCFv4.3 section 6.3.
// The data is simulated here, with a seeded generator.
#include <gtest/gtest.h>
#include <htslib/bgzf.h>
#include <htslib/hts.h>
#include <htslib/vcf.h>

#include <algorithm>
#include <atomic>
#include <cstdint>
#include <cstring>
#include <memory>
#include <random>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "genotypes/bcf_records.hpp"
#include "genotypes/bgzf_prefetch.hpp"
#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis {
namespace {

using genotype_detail::PrefetchedBgzf;
using genotype_detail::read_bcf_record;
using testing::read_text_file;
using testing::run_command;
using testing::write_text_file;

// The stream's own sizes (bgzf_prefetch.cpp): chunks of 16 blocks, 8 in the
// ring. Files here hold far more than 8 x 16 blocks so that the ring wraps.
constexpr std::size_t kBlocksInRing = 8 * 16;

// The empty block that ends every BGZF file (SAMv1 4.1.2); BGZF also allows
// it between blocks, where readers skip it.
const std::string kEndOfFileBlock(
    "\x1f\x8b\x08\x04\x00\x00\x00\x00\x00\xff\x06\x00\x42\x43\x02\x00\x1b\x00\x03\x00\x00\x00\x00\x00\x00\x00\x00\x00",
    28);

std::string quoted(const std::string& path) { return "'" + path + "'"; }

// ---- simulated data ---------------------------------------------------------------

struct CohortShape {
  int records = 0;
  int samples = 0;
  std::uint32_t seed = 1;
  // One record whose INFO/NOTE alone outgrows a 64 KiB BGZF block.
  bool with_oversized_record = false;
};

std::string cohort_header(int samples) {
  std::string text =
      "##fileformat=VCFv4.3\n"
      "##FILTER=<ID=PASS,Description=\"All filters passed\">\n"
      "##FILTER=<ID=q10,Description=\"Quality below 10\">\n"
      "##FILTER=<ID=lowcov,Description=\"Low coverage\">\n"
      "##contig=<ID=7,length=160000000>\n"
      "##contig=<ID=chr12,length=140000000>\n"
      "##INFO=<ID=AF,Number=A,Type=Float,Description=\"ALT allele frequency\">\n"
      "##INFO=<ID=DP,Number=1,Type=Integer,Description=\"Read depth\">\n"
      "##INFO=<ID=NOTE,Number=1,Type=String,Description=\"Free text\">\n"
      "##INFO=<ID=TYPED,Number=0,Type=Flag,Description=\"Directly typed\">\n"
      "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"Genotype\">\n"
      "##FORMAT=<ID=DS,Number=A,Type=Float,Description=\"Expected ALT allele count\">\n"
      "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT";
  for (int sample_idx = 1; sample_idx <= samples; ++sample_idx) text += "\tW" + std::to_string(1000 + sample_idx);
  return text + "\n";
}

class CohortWriter {
 public:
  explicit CohortWriter(std::uint32_t seed) : random_(seed) {}

  std::string record(const std::string& contig, std::int64_t position, int samples, bool oversized) {
    const int alt_count = chance(0.12) ? 2 : 1;
    const std::string ref = chance(0.1) ? "AT" : "C";
    std::string line = contig + "\t" + std::to_string(position) + "\t" +
                       (chance(0.5) ? "." : "v" + std::to_string(position)) + "\t" + ref + "\t" +
                       (alt_count == 2 ? "G,T" : "G") + "\t" + (chance(0.3) ? "." : decimal(uniform(0, 99), 1)) +
                       "\t" + filter() + "\t" + info(alt_count, oversized) + "\tGT:DS";
    for (int sample_idx = 0; sample_idx < samples; ++sample_idx) line += "\t" + sample_value(alt_count);
    return line + "\n";
  }

 private:
  bool chance(double probability) { return std::uniform_real_distribution<double>(0, 1)(random_) < probability; }
  double uniform(double low, double high) { return std::uniform_real_distribution<double>(low, high)(random_); }
  int integer(int low, int high) { return std::uniform_int_distribution<int>(low, high)(random_); }

  static std::string decimal(double value, int digits) {
    std::ostringstream text;
    text.precision(digits);
    text << std::fixed << value;
    return text.str();
  }

  std::string filter() {
    const char* filters[] = {".", "PASS", "q10", "q10;lowcov"};
    return filters[integer(0, 3)];
  }

  std::string info(int alt_count, bool oversized) {
    if (chance(0.1) && !oversized) return ".";
    std::string text = "AF=" + decimal(uniform(0, 0.5), 4);
    if (alt_count == 2) text += "," + decimal(uniform(0, 0.5), 4);
    if (chance(0.7)) text += ";DP=" + std::to_string(integer(0, 40000));
    if (oversized) text += ";NOTE=" + std::string(100000, 'n');
    if (chance(0.3)) text += ";TYPED";
    return text;
  }

  std::string sample_value(int alt_count) {
    std::string genotype = "./.";
    if (!chance(0.03)) {
      const char separator = chance(0.2) ? '|' : '/';
      genotype = std::to_string(integer(0, alt_count)) + separator + std::to_string(integer(0, alt_count));
    }
    if (chance(0.03)) return genotype + ":.";
    std::string dosages;
    double left = 2.0;
    for (int alt_idx = 0; alt_idx < alt_count; ++alt_idx) {
      const double dosage = uniform(0, left);
      left -= dosage;
      dosages += (alt_idx ? "," : "") + decimal(dosage, 3);
    }
    return genotype + ":" + dosages;
  }

  std::mt19937 random_;
};

// Records on two contigs, in position order.
std::string simulated_vcf(const CohortShape& shape) {
  CohortWriter writer(shape.seed);
  std::string text = cohort_header(shape.samples);
  std::int64_t position = 1000;
  for (int record_idx = 0; record_idx < shape.records; ++record_idx) {
    const bool second_contig = record_idx >= shape.records / 2;
    if (record_idx == shape.records / 2) position = 500;
    position += 1 + record_idx % 97;
    const bool oversized = shape.with_oversized_record && record_idx == shape.records / 3;
    text += writer.record(second_contig ? "chr12" : "7", position, shape.samples, oversized);
  }
  return text;
}

// bcftools 1.16 view -Ob.
std::string write_bcf(const std::string& vcf_path, const std::string& bcf_path) {
  EXPECT_EQ(run_command("bcftools view -Ob -o " + quoted(bcf_path) + " " + quoted(vcf_path) + " 2>/dev/null"), 0);
  return bcf_path;
}

// The inflated stream as bgzip (htslib 1.16) -dc gives it.
std::string inflated_by_bgzip(const std::string& path) {
  const std::string out = path + ".inflated";
  EXPECT_EQ(run_command("bgzip -dc " + quoted(path) + " > " + quoted(out)), 0);
  return read_text_file(out);
}

// `data` as BGZF in blocks of pseudo-random sizes up to `largest_block`
// bytes of inflated data (htslib 1.16 bgzf_write, one bgzf_flush per block),
// with one empty block spliced in after the first third of the file.
void write_in_small_blocks(const std::string& data, const std::string& path, std::size_t largest_block,
                           std::uint32_t seed) {
  BGZF* file = bgzf_open(path.c_str(), "w");
  ASSERT_NE(file, nullptr);
  std::mt19937 random(seed);
  std::uniform_int_distribution<std::size_t> block_size(1, largest_block);
  std::int64_t third = 0;
  for (std::size_t at = 0; at < data.size();) {
    const std::size_t size = std::min(block_size(random), data.size() - at);
    ASSERT_EQ(bgzf_write(file, data.data() + at, size), static_cast<ssize_t>(size));
    ASSERT_EQ(bgzf_flush(file), 0);
    at += size;
    if (third == 0 && at >= data.size() / 3) third = bgzf_tell(file) >> 16;
  }
  ASSERT_EQ(bgzf_close(file), 0);
  std::string bytes = read_text_file(path);
  bytes.insert(static_cast<std::size_t>(third), kEndOfFileBlock);
  write_text_file(path, bytes);
}

// ---- BGZF layout, walked from the block headers (SAMv1 4.1) -----------------

struct BlockPlace {
  std::size_t file_offset = 0;
  std::size_t size = 0;           // bytes in the file
  std::size_t stream_offset = 0;  // where its inflated data starts in the stream
};

std::uint32_t le32(const std::string& bytes, std::size_t at) {
  std::uint32_t value = 0;
  for (int byte_idx = 3; byte_idx >= 0; --byte_idx) {
    value = value << 8 | static_cast<std::uint8_t>(bytes[at + byte_idx]);
  }
  return value;
}

void set_le32(std::string& bytes, std::size_t at, std::uint32_t value) {
  for (int byte_idx = 0; byte_idx < 4; ++byte_idx) bytes[at + byte_idx] = static_cast<char>(value >> (8 * byte_idx));
}

std::vector<BlockPlace> block_layout(const std::string& file_bytes) {
  std::vector<BlockPlace> blocks;
  std::size_t stream_offset = 0;
  for (std::size_t at = 0; at + 18 <= file_bytes.size();) {
    const std::size_t size = (static_cast<std::uint8_t>(file_bytes[at + 16]) |
                              static_cast<std::uint8_t>(file_bytes[at + 17]) << 8) + 1u;
    blocks.push_back({at, size, stream_offset});
    stream_offset += le32(file_bytes, at + size - 4);
    at += size;
  }
  return blocks;
}

// The block holding the middle of the file, which must not be the last (the
// end-of-file block stays intact).
BlockPlace middle_block(const std::vector<BlockPlace>& blocks, const std::string& file_bytes) {
  const std::size_t middle = file_bytes.size() / 2;
  for (const BlockPlace& block : blocks) {
    if (middle < block.file_offset + block.size) return block;
  }
  ADD_FAILURE() << "no block holds the middle of the file";
  return {};
}

// ---- reading the prefetched stream --------------------------------------------

// Threads that inflate ahead of the reader for as long as they live, as the
// scan's worker threads do. Destroy them before the stream.
class InflatingHelpers {
 public:
  template <typename Help>
  InflatingHelpers(int count, Help help) {
    for (int thread_idx = 0; thread_idx < count; ++thread_idx) {
      threads_.emplace_back([this, help] {
        while (!stop_.load(std::memory_order_relaxed)) {
          if (help()) {
            chunks_.fetch_add(1, std::memory_order_relaxed);
          } else {
            std::this_thread::yield();
          }
        }
      });
    }
  }
  ~InflatingHelpers() { stop(); }
  // Joins the threads; returns how many chunks they inflated in all.
  std::size_t stop() {
    stop_.store(true);
    for (std::thread& thread : threads_) {
      if (thread.joinable()) thread.join();
    }
    return chunks_.load();
  }
  InflatingHelpers(const InflatingHelpers&) = delete;
  InflatingHelpers& operator=(const InflatingHelpers&) = delete;

 private:
  std::atomic<bool> stop_{false};
  std::atomic<std::size_t> chunks_{0};
  std::vector<std::thread> threads_;
};

struct StreamReading {
  std::string bytes;
  bool damaged = false;
  bool short_read_before_end = false;  // a short read that more data followed
};

// Reads the whole stream in pieces of seeded pseudo-random lengths: short
// ones, ones about a block long and ones spanning several chunks. With
// `help_between`, the reading thread itself calls help() 0 to 3 times after
// each piece, so that chunks are inflated ahead in an order that repeats.
StreamReading read_in_pieces(PrefetchedBgzf& stream, std::uint32_t seed, bool help_between = false) {
  std::mt19937 random(seed);
  const std::size_t largest[] = {7, 300, 70000, 1500000};
  std::vector<char> buffer(largest[3]);
  StreamReading reading;
  bool had_short_read = false;
  while (true) {
    const std::size_t scale = largest[std::uniform_int_distribution<int>(0, 3)(random)];
    const std::size_t length = std::uniform_int_distribution<std::size_t>(1, scale)(random);
    const std::int64_t got = stream.read(buffer.data(), length);
    if (got < 0) {
      reading.damaged = true;
      return reading;
    }
    if (got > 0 && had_short_read) reading.short_read_before_end = true;
    if (got == 0) return reading;
    reading.bytes.append(buffer.data(), static_cast<std::size_t>(got));
    had_short_read = had_short_read || got < static_cast<std::int64_t>(length);
    const int helps = help_between ? std::uniform_int_distribution<int>(0, 3)(random) : 0;
    for (int help_idx = 0; help_idx < helps; ++help_idx) stream.help();
  }
}

std::unique_ptr<PrefetchedBgzf> open_stream(const std::string& path, std::int64_t virtual_offset = 0) {
  std::unique_ptr<PrefetchedBgzf> stream = PrefetchedBgzf::open(path, virtual_offset);
  EXPECT_NE(stream, nullptr) << path;
  return stream;
}

// ---- records as htslib and as read_bcf_record give them ---------------------------

// The parts of a packed bcf1_t that bcf_read fills.
struct RecordImage {
  std::int32_t rid = 0;
  std::int64_t pos = 0;
  std::int64_t rlen = 0;
  std::uint32_t qual_bits = 0;
  std::uint32_t n_info = 0, n_allele = 0, n_sample = 0, n_fmt = 0;
  std::string shared, indiv;

  bool operator==(const RecordImage& other) const {
    return rid == other.rid && pos == other.pos && rlen == other.rlen && qual_bits == other.qual_bits &&
           n_info == other.n_info && n_allele == other.n_allele && n_sample == other.n_sample &&
           n_fmt == other.n_fmt && shared == other.shared && indiv == other.indiv;
  }
};

void PrintTo(const RecordImage& image, std::ostream* out) {
  *out << "rid " << image.rid << " pos " << image.pos << " rlen " << image.rlen << " qual bits " << image.qual_bits
       << " n_info " << image.n_info << " n_allele " << image.n_allele << " n_sample " << image.n_sample
       << " n_fmt " << image.n_fmt << ", " << image.shared.size() << " shared and " << image.indiv.size()
       << " per-sample bytes";
}

RecordImage image_of(const bcf1_t* record) {
  RecordImage image;
  image.rid = record->rid;
  image.pos = record->pos;
  image.rlen = record->rlen;
  std::memcpy(&image.qual_bits, &record->qual, sizeof image.qual_bits);
  image.n_info = record->n_info;
  image.n_allele = record->n_allele;
  image.n_sample = record->n_sample;
  image.n_fmt = record->n_fmt;
  image.shared.assign(record->shared.s, record->shared.l);
  image.indiv.assign(record->indiv.s, record->indiv.l);
  return image;
}

// A BCF opened with htslib, its header read: where the records start.
class OpenedBcf {
 public:
  explicit OpenedBcf(const std::string& path) : file_(hts_open(path.c_str(), "r")) {
    if (file_) header_ = bcf_hdr_read(file_);
  }
  ~OpenedBcf() {
    if (header_) bcf_hdr_destroy(header_);
    if (file_) hts_close(file_);
  }
  OpenedBcf(const OpenedBcf&) = delete;
  OpenedBcf& operator=(const OpenedBcf&) = delete;

  bool is_open() const { return header_ != nullptr; }
  htsFile* file() const { return file_; }
  const bcf_hdr_t* header() const { return header_; }
  std::int64_t records_start() const { return bgzf_tell(file_->fp.bgzf); }

 private:
  htsFile* file_ = nullptr;
  bcf_hdr_t* header_ = nullptr;
};

struct RecordPtr {
  RecordPtr() : record(bcf_init()) {}
  ~RecordPtr() { bcf_destroy(record); }
  bcf1_t* record;
};

// htslib 1.16 bcf_read, to the end of the file; `status` is its last answer.
std::vector<RecordImage> records_read_by_htslib(const std::string& path, int* status) {
  OpenedBcf bcf(path);
  EXPECT_TRUE(bcf.is_open()) << path;
  std::vector<RecordImage> images;
  if (!bcf.is_open()) return images;
  RecordPtr slot;
  while ((*status = bcf_read(bcf.file(), bcf.header(), slot.record)) == 0) images.push_back(image_of(slot.record));
  return images;
}

// PrefetchedBgzf from the records' start + read_bcf_record, with `helpers`
// threads calling help() meanwhile; `status` is the last answer, and
// `helped` (when given) how many chunks the helpers inflated.
std::vector<RecordImage> records_read_by_prefetch(const std::string& path, int helpers, int* status,
                                                  std::size_t* helped = nullptr) {
  OpenedBcf bcf(path);
  EXPECT_TRUE(bcf.is_open()) << path;
  std::vector<RecordImage> images;
  if (!bcf.is_open()) return images;
  const std::unique_ptr<PrefetchedBgzf> stream = open_stream(path, bcf.records_start());
  if (!stream) return images;
  InflatingHelpers helping(helpers, [&stream] { return stream->help(); });
  RecordPtr slot;
  while ((*status = read_bcf_record(*stream, bcf.header(), slot.record)) == 0) images.push_back(image_of(slot.record));
  const std::size_t chunks = helping.stop();
  if (helped) *helped = chunks;
  return images;
}

void expect_same_records(const std::vector<RecordImage>& expected, const std::vector<RecordImage>& got) {
  ASSERT_EQ(got.size(), expected.size());
  for (std::size_t record_idx = 0; record_idx < expected.size(); ++record_idx) {
    ASSERT_EQ(got[record_idx], expected[record_idx]) << "record " << record_idx + 1;
  }
}

// ---- the shared cohort ----------------------------------------------------------------

// The simulated cohort as a BCF from bcftools (full 64 KiB blocks) and as the
// same stream in small blocks (hundreds of them), made on first use.
class BcfPrefetch : public ::testing::Test {
 protected:
  void SetUp() override {
    const ::testing::TestInfo* info = ::testing::UnitTest::GetInstance()->current_test_info();
    dir_ = testing::make_temp_dir(std::string("bcf_prefetch/") + info->name());
  }

  const std::string& bcf_from_bcftools() {
    if (bcf_.empty()) {
      const std::string vcf = dir_ + "/cohort.vcf";
      write_text_file(vcf, simulated_vcf({3000, 48, 11, true}));
      bcf_ = write_bcf(vcf, dir_ + "/cohort.bcf");
    }
    return bcf_;
  }

  const std::string& true_stream() {
    if (stream_.empty()) stream_ = inflated_by_bgzip(bcf_from_bcftools());
    return stream_;
  }

  const std::string& bcf_in_small_blocks() {
    if (small_blocks_.empty()) {
      small_blocks_ = dir_ + "/cohort_small_blocks.bcf";
      write_in_small_blocks(true_stream(), small_blocks_, 6000, 5);
    }
    return small_blocks_;
  }

  std::string dir_;

 private:
  std::string bcf_, stream_, small_blocks_;
};

// The files are as large as the tests need them to be.
TEST_F(BcfPrefetch, TheSimulatedFilesHoldEnoughBlocks) {
  const std::vector<BlockPlace> small = block_layout(read_text_file(bcf_in_small_blocks()));
  EXPECT_GT(small.size(), 2 * kBlocksInRing);
  EXPECT_GT(block_layout(read_text_file(bcf_from_bcftools())).size(), 16u);
  // bgzip 1.16 -dc inflates the small-block copy to the same stream.
  EXPECT_EQ(inflated_by_bgzip(bcf_in_small_blocks()), true_stream());
}

// ---- records against htslib bcf_read ---------------------------------------------------

TEST_F(BcfPrefetch, RecordsMatchHtslibBcfRead) {
  for (const std::string& path : {bcf_from_bcftools(), bcf_in_small_blocks()}) {
    SCOPED_TRACE(path);
    int htslib_status = 0, prefetch_status = 0;
    const std::vector<RecordImage> expected = records_read_by_htslib(path, &htslib_status);
    EXPECT_EQ(htslib_status, -1);  // htslib 1.16 bcf_read: -1 at the end
    ASSERT_EQ(expected.size(), 3000u);
    // The same records as htslib 1.16 bcf_read gives.
    expect_same_records(expected, records_read_by_prefetch(path, 0, &prefetch_status));
    EXPECT_EQ(prefetch_status, -1);
  }
}

TEST_F(BcfPrefetch, RecordsMatchHtslibBcfReadWhileThreadsInflateAhead) {
  for (const std::string& path : {bcf_from_bcftools(), bcf_in_small_blocks()}) {
    int htslib_status = 0;
    const std::vector<RecordImage> expected = records_read_by_htslib(path, &htslib_status);
    ASSERT_EQ(expected.size(), 3000u);
    // Every chunk is inflated once: by a helper or by the reader. Chunks
    // hold 16 blocks; the ring's eight start (and end) waiting, data or not.
    const std::size_t chunk_fills = block_layout(read_text_file(path)).size() / 16 + 1 + 8;
    for (int helpers : {1, 2}) {
      SCOPED_TRACE(path + " with " + std::to_string(helpers) + " helper(s)");
      int prefetch_status = 0;
      std::size_t helped = 0;
      expect_same_records(expected, records_read_by_prefetch(path, helpers, &prefetch_status, &helped));
      EXPECT_EQ(prefetch_status, -1);
      EXPECT_LE(helped, chunk_fills);
      // How much the helpers took on depends on timing; the XML report keeps it.
      ::testing::Test::RecordProperty(std::to_string(helpers) + "_helpers_inflated_chunks",
                                      std::to_string(helped) + " of " + std::to_string(chunk_fills));
    }
  }
}

// ---- the inflated stream against bgzip -dc ----------------------------------------------

TEST_F(BcfPrefetch, StreamInPiecesOfAnyLengthMatchesBgzip) {
  for (const std::string& path : {bcf_from_bcftools(), bcf_in_small_blocks()}) {
    for (int helpers : {0, 2}) {
      SCOPED_TRACE(path + " with " + std::to_string(helpers) + " helper(s)");
      const std::unique_ptr<PrefetchedBgzf> stream = open_stream(path);
      ASSERT_NE(stream, nullptr);
      const InflatingHelpers helping(helpers, [&stream] { return stream->help(); });
      const StreamReading reading = read_in_pieces(*stream, 17 + helpers);
      EXPECT_FALSE(reading.damaged);
      EXPECT_FALSE(reading.short_read_before_end);
      EXPECT_TRUE(reading.bytes == true_stream())  // as bgzip 1.16 -dc inflates it
          << reading.bytes.size() << " bytes read of " << true_stream().size();
      char byte = 0;
      EXPECT_EQ(stream->read(&byte, 1), 0) << "the end stays the end";
    }
  }
}

TEST_F(BcfPrefetch, StreamWithHelpBetweenReadsMatchesBgzip) {
  for (const std::string& path : {bcf_from_bcftools(), bcf_in_small_blocks()}) {
    SCOPED_TRACE(path);
    const std::unique_ptr<PrefetchedBgzf> stream = open_stream(path);
    ASSERT_NE(stream, nullptr);
    const StreamReading reading = read_in_pieces(*stream, 23, true);
    EXPECT_FALSE(reading.damaged);
    EXPECT_TRUE(reading.bytes == true_stream())  // as bgzip 1.16 -dc inflates it
          << reading.bytes.size() << " bytes read of " << true_stream().size();
  }
}

// One read asking for more than is left gets exactly what is left.
TEST_F(BcfPrefetch, ReadPastTheEndGivesTheRest) {
  const std::unique_ptr<PrefetchedBgzf> stream = open_stream(bcf_in_small_blocks());
  ASSERT_NE(stream, nullptr);
  std::string everything(true_stream().size() + 1000, '\0');
  EXPECT_EQ(stream->read(everything.data(), everything.size()), static_cast<std::int64_t>(true_stream().size()));
  everything.resize(true_stream().size());
  EXPECT_TRUE(everything == true_stream());
  EXPECT_EQ(stream->read(everything.data(), 0), 0);
}

// The first block at or after `block_idx` that holds data.
std::size_t block_with_data(const std::vector<BlockPlace>& blocks, std::size_t block_idx) {
  while (block_idx + 1 < blocks.size() && blocks[block_idx + 1].stream_offset == blocks[block_idx].stream_offset) {
    ++block_idx;
  }
  return block_idx;
}

// The empty block spliced in mid-file.
std::size_t empty_block(const std::vector<BlockPlace>& blocks) {
  for (std::size_t block_idx = 0; block_idx + 2 < blocks.size(); ++block_idx) {
    if (blocks[block_idx + 1].stream_offset == blocks[block_idx].stream_offset) return block_idx;
  }
  ADD_FAILURE() << "no empty block before the last";
  return 0;
}

void expect_stream_from(const std::string& path, std::int64_t virtual_offset, const std::string& expected) {
  const std::unique_ptr<PrefetchedBgzf> stream = open_stream(path, virtual_offset);
  ASSERT_NE(stream, nullptr);
  const StreamReading reading = read_in_pieces(*stream, 3);
  EXPECT_FALSE(reading.damaged);
  EXPECT_TRUE(reading.bytes == expected) << reading.bytes.size() << " bytes read, " << expected.size() << " expected";
}

// A virtual offset is a block's file offset times 65536 plus a place in its
// inflated data (SAMv1 4.1.1); blocks before, in and after the first wrap
// of the ring, at their first, second and last byte, and the empty block.
TEST_F(BcfPrefetch, StreamOpenedAtAVirtualOffsetStartsThere) {
  const std::vector<BlockPlace> blocks = block_layout(read_text_file(bcf_in_small_blocks()));
  ASSERT_GT(blocks.size(), kBlocksInRing + 40);
  for (std::size_t wanted_idx : {std::size_t{0}, std::size_t{5}, kBlocksInRing - 1, kBlocksInRing + 17}) {
    const std::size_t block_idx = block_with_data(blocks, wanted_idx);
    const BlockPlace& block = blocks[block_idx];
    const std::size_t inflated_size = blocks[block_idx + 1].stream_offset - block.stream_offset;
    for (std::size_t within : {std::size_t{0}, std::size_t{1}, inflated_size - 1}) {
      SCOPED_TRACE("block " + std::to_string(block_idx) + ", byte " + std::to_string(within));
      const std::int64_t virtual_offset = static_cast<std::int64_t>(block.file_offset) << 16 | within;
      expect_stream_from(bcf_in_small_blocks(), virtual_offset, true_stream().substr(block.stream_offset + within));
    }
  }
  const BlockPlace& empty = blocks[empty_block(blocks)];
  expect_stream_from(bcf_in_small_blocks(), static_cast<std::int64_t>(empty.file_offset) << 16,
                     true_stream().substr(empty.stream_offset));
}

// Eight chunks wait after open(); each help() inflates one, once.
TEST_F(BcfPrefetch, HelpInflatesEachWaitingChunkOnce) {
  const std::unique_ptr<PrefetchedBgzf> stream = open_stream(bcf_in_small_blocks());
  ASSERT_NE(stream, nullptr);
  for (int chunk_idx = 0; chunk_idx < 8; ++chunk_idx) EXPECT_TRUE(stream->help()) << "chunk " << chunk_idx;
  EXPECT_FALSE(stream->help());
  // Reading past the first chunk frees it for the blocks after the eighth.
  const std::vector<BlockPlace> blocks = block_layout(read_text_file(bcf_in_small_blocks()));
  std::string first_chunk(blocks[16].stream_offset + 1, '\0');
  ASSERT_EQ(stream->read(first_chunk.data(), first_chunk.size()), static_cast<std::int64_t>(first_chunk.size()));
  EXPECT_TRUE(stream->help());
  EXPECT_FALSE(stream->help());
  const StreamReading rest = read_in_pieces(*stream, 8);
  EXPECT_FALSE(rest.damaged);
  EXPECT_TRUE(first_chunk + rest.bytes == true_stream());
}

TEST(BcfPrefetchOpen, MissingFileGivesNoStream) {
  EXPECT_EQ(PrefetchedBgzf::open("/nonexistent/tamis/no.bcf", 0), nullptr);
}

// ---- damaged data ------------------------------------------------------------------------

// The blocks before the damaged one come whole; then read() says -1, and
// keeps saying it. Reading in pieces only ever gives a prefix of the truth.
void expect_damage_found_at(const std::string& path, std::size_t good_bytes, const std::string& truth,
                            int helpers) {
  SCOPED_TRACE(path + " with " + std::to_string(helpers) + " helper(s)");
  {
    const std::unique_ptr<PrefetchedBgzf> stream = open_stream(path);
    ASSERT_NE(stream, nullptr);
    const InflatingHelpers helping(helpers, [&stream] { return stream->help(); });
    std::string good(good_bytes, '\0');
    EXPECT_EQ(stream->read(good.data(), good.size()), static_cast<std::int64_t>(good_bytes));
    EXPECT_TRUE(good == truth.substr(0, good_bytes));
    char byte = 0;
    EXPECT_EQ(stream->read(&byte, 1), -1);
    EXPECT_EQ(stream->read(&byte, 1), -1);
  }
  const std::unique_ptr<PrefetchedBgzf> stream = open_stream(path);
  ASSERT_NE(stream, nullptr);
  const InflatingHelpers helping(helpers, [&stream] { return stream->help(); });
  const StreamReading reading = read_in_pieces(*stream, 29);
  EXPECT_TRUE(reading.damaged);
  EXPECT_LE(reading.bytes.size(), good_bytes);
  EXPECT_TRUE(truth.compare(0, reading.bytes.size(), reading.bytes) == 0) << "bytes that are not the file's";
}

struct DamageCase {
  std::string path;
  std::size_t good_bytes;  // the inflated data of the blocks before the damaged one
};

// Damaged copies of `source`, each damaged in the block holding the middle of the file.
std::vector<DamageCase> damaged_copies(const std::string& source, const std::string& dir) {
  const std::string bytes = read_text_file(source);
  const std::vector<BlockPlace> blocks = block_layout(bytes);
  const BlockPlace block = middle_block(blocks, bytes);
  const std::size_t block_middle = block.file_offset + block.size / 2;
  EXPECT_LT(block_middle + 16, bytes.size() - kEndOfFileBlock.size());
  const std::string name = dir + "/" + source.substr(source.rfind('/') + 1);
  std::string flipped = bytes;
  for (std::size_t byte_idx = bytes.size() / 2; byte_idx < bytes.size() / 2 + 16; ++byte_idx) flipped[byte_idx] ^= 0x5A;
  write_text_file(name + ".flipped", flipped);
  write_text_file(name + ".cut_with_marker", bytes.substr(0, block_middle) + kEndOfFileBlock);
  write_text_file(name + ".cut", bytes.substr(0, block_middle));
  return {{name + ".flipped", block.stream_offset},
          {name + ".cut_with_marker", block.stream_offset},
          {name + ".cut", block.stream_offset}};
}

TEST_F(BcfPrefetch, DamagedCopiesGiveWhatCameBeforeTheDamage) {
  for (const std::string& source : {bcf_from_bcftools(), bcf_in_small_blocks()}) {
    for (const DamageCase& damage : damaged_copies(source, dir_)) {
      for (int helpers : {0, 2}) expect_damage_found_at(damage.path, damage.good_bytes, true_stream(), helpers);
    }
  }
}

// Each field of a block's header and trailer that a reader relies on
// (SAMv1 4.1): ID1 ID2 CM, XLEN, SI1 SI2 SLEN, BSIZE, CRC32, ISIZE.
TEST_F(BcfPrefetch, EveryFieldOfTheBlockFramingIsChecked) {
  const std::string bytes = read_text_file(bcf_in_small_blocks());
  const std::vector<BlockPlace> blocks = block_layout(bytes);
  const BlockPlace block = blocks[block_with_data(blocks, kBlocksInRing + 3)];
  std::vector<std::size_t> checked_bytes = {0, 1, 2, 10, 11, 12, 13, 14, 15, 16, 17};
  for (std::size_t from_end = 8; from_end >= 1; --from_end) checked_bytes.push_back(block.size - from_end);
  for (std::size_t byte_in_block : checked_bytes) {
    SCOPED_TRACE("byte " + std::to_string(byte_in_block) + " of the block");
    std::string damaged = bytes;
    damaged[block.file_offset + byte_in_block] ^= 0x5A;
    const std::string path = dir_ + "/framing_" + std::to_string(byte_in_block) + ".bcf";
    write_text_file(path, damaged);
    expect_damage_found_at(path, block.stream_offset, true_stream(), 0);
  }
}

// ---- malformed records ----------------------------------------------------------------

// A small BCF from bcftools 1.16: its header bytes and its records' bytes.
struct SmallBcf {
  std::string header;                // "BCF\2\2", the text length and the text
  std::vector<std::string> records;  // each with its two lengths
};

const char kSmallVcf[] =
    "##fileformat=VCFv4.3\n"
    "##FILTER=<ID=PASS,Description=\"All filters passed\">\n"
    "##FILTER=<ID=q10,Description=\"Quality below 10\">\n"
    "##contig=<ID=1,length=1000000>\n"
    "##contig=<ID=chrX,length=1000000>\n"
    "##INFO=<ID=AF,Number=A,Type=Float,Description=\"ALT allele frequency\">\n"
    "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"Genotype\">\n"
    "##FORMAT=<ID=DS,Number=A,Type=Float,Description=\"Expected ALT allele count\">\n"
    "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT\tS1\tS2\tS3\n"
    "1\t100\tv1\tA\tG\t50\tPASS\tAF=0.25\tGT:DS\t0/1:0.9\t1/1:1.8\t0/0:0.1\n"
    "1\t200\tv2\tC\tT\t.\tq10\tAF=0.5\tGT:DS\t0/0:0.2\t0/1:1.1\t1/1:2\n"
    "chrX\t300\t.\tG\tA\t7\tPASS\tAF=0.1\tGT:DS\t0/1:1\t./.:.\t0/0:0\n";

SmallBcf split_bcf_stream(const std::string& stream) {
  SmallBcf bcf;
  const std::size_t header_size = 9 + le32(stream, 5);
  bcf.header = stream.substr(0, header_size);
  for (std::size_t at = header_size; at + 8 <= stream.size();) {
    const std::size_t size = 8 + std::size_t{le32(stream, at)} + le32(stream, at + 4);
    bcf.records.push_back(stream.substr(at, size));
    at += size;
  }
  return bcf;
}

// Where the typed values of one record start (BCF 2.2, hts-specs VCFv4.3 6.3):
// the descriptor byte of each, counted from the record's first byte.
struct RecordLandmarks {
  std::size_t id = 0;
  std::size_t filter = 0;
  std::vector<std::size_t> info_keys, info_values;
  std::vector<std::size_t> format_keys, format_values;
};

std::size_t type_width(int type) {
  static const std::size_t widths[16] = {0, 1, 2, 4, 0, 4, 0, 1};
  return widths[type & 0xF];
}

// Skips the typed value at `at` (repeated `copies` times for per-sample data).
std::size_t skip_typed_value(const std::string& record, std::size_t at, std::size_t copies = 1) {
  const std::uint8_t descriptor = static_cast<std::uint8_t>(record[at++]);
  std::size_t count = descriptor >> 4;
  if (count == 15) {
    // The count, itself a typed int8 here.
    EXPECT_EQ(static_cast<std::uint8_t>(record[at]), 0x11);
    count = static_cast<std::uint8_t>(record[at + 1]);
    at += 2;
  }
  return at + count * type_width(descriptor) * copies;
}

RecordLandmarks landmarks_of(const std::string& record) {
  RecordLandmarks marks;
  const std::uint32_t alleles = le32(record, 24) >> 16, infos = le32(record, 24) & 0xFFFF;
  const std::uint32_t samples = le32(record, 28) & 0xFFFFFF, formats = le32(record, 28) >> 24;
  marks.id = 32;
  std::size_t at = skip_typed_value(record, marks.id);
  for (std::uint32_t allele = 0; allele < alleles; ++allele) at = skip_typed_value(record, at);
  marks.filter = at;
  at = skip_typed_value(record, at);
  for (std::uint32_t info = 0; info < infos; ++info) {
    marks.info_keys.push_back(at);
    marks.info_values.push_back(at = skip_typed_value(record, at));
    at = skip_typed_value(record, at);
  }
  EXPECT_EQ(at, 8 + le32(record, 0)) << "the shared section ends where l_shared says";
  for (std::uint32_t format = 0; format < formats; ++format) {
    marks.format_keys.push_back(at);
    marks.format_values.push_back(at = skip_typed_value(record, at));
    at = skip_typed_value(record, at, samples);
  }
  EXPECT_EQ(at, record.size()) << "the per-sample section ends where l_indiv says";
  return marks;
}

void set_type(std::string& record, std::size_t descriptor_at, int type) {
  record[descriptor_at] = static_cast<char>((record[descriptor_at] & 0xF0) | type);
}

// A typed int8 key (descriptor 0x11, one value) set to `key`.
void set_int8_key(std::string& record, std::size_t descriptor_at, std::int8_t key) {
  EXPECT_EQ(static_cast<std::uint8_t>(record[descriptor_at]), 0x11);
  record[descriptor_at + 1] = static_cast<char>(key);
}

void add_to_count(std::string& record, std::size_t descriptor_at, int more) {
  const int count = static_cast<std::uint8_t>(record[descriptor_at]) >> 4;
  ASSERT_LT(count + more, 15);
  record[descriptor_at] = static_cast<char>(((count + more) << 4) | (record[descriptor_at] & 0xF));
}

struct RecordEdit {
  const char* name;
  void (*edit)(std::string& record, const RecordLandmarks& marks);
};

void PrintTo(const RecordEdit& edit, std::ostream* out) { *out << edit.name; }

const RecordEdit kRecordEdits[] = {
    {"contig_beyond_the_header", [](std::string& r, const RecordLandmarks&) { set_le32(r, 8, 2); }},
    {"negative_contig", [](std::string& r, const RecordLandmarks&) { set_le32(r, 8, 0xFFFFFFFFu); }},
    {"info_key_not_in_the_header", [](std::string& r, const RecordLandmarks& m) { set_int8_key(r, m.info_keys[0], 100); }},
    {"negative_info_key", [](std::string& r, const RecordLandmarks& m) { set_int8_key(r, m.info_keys[0], -3); }},
    {"filter_key_not_in_the_header",
     [](std::string& r, const RecordLandmarks& m) { set_int8_key(r, m.filter, 100); }},
    {"format_key_not_in_the_header",
     [](std::string& r, const RecordLandmarks& m) { set_int8_key(r, m.format_keys[1], 100); }},
    {"fewer_samples_than_the_header",
     [](std::string& r, const RecordLandmarks&) { set_le32(r, 28, (le32(r, 28) & 0xFF000000u) | 2); }},
    {"more_samples_than_the_header",
     [](std::string& r, const RecordLandmarks&) { set_le32(r, 28, (le32(r, 28) & 0xFF000000u) | 4); }},
    {"shared_length_below_the_fixed_fields", [](std::string& r, const RecordLandmarks&) { set_le32(r, 0, 20); }},
    {"absurd_shared_length", [](std::string& r, const RecordLandmarks&) { set_le32(r, 0, 0xFFFFFF00u); }},
    {"absurd_sample_length", [](std::string& r, const RecordLandmarks&) { set_le32(r, 4, 0xF0000000u); }},
    {"format_vector_past_its_section",
     [](std::string& r, const RecordLandmarks& m) { add_to_count(r, m.format_values.back(), 1); }},
    {"info_vector_past_its_section",
     [](std::string& r, const RecordLandmarks& m) { add_to_count(r, m.info_values.back(), 9); }},
    {"id_of_an_unknown_type", [](std::string& r, const RecordLandmarks& m) { set_type(r, m.id, 4); }},
    {"info_value_of_an_unknown_type",
     [](std::string& r, const RecordLandmarks& m) { set_type(r, m.info_values[0], 6); }},
    {"format_value_of_an_unknown_type",
     [](std::string& r, const RecordLandmarks& m) { set_type(r, m.format_values[1], 9); }},
    {"more_info_fields_than_present",
     [](std::string& r, const RecordLandmarks&) { set_le32(r, 24, le32(r, 24) + 2); }},
    {"more_format_fields_than_present",
     [](std::string& r, const RecordLandmarks&) { set_le32(r, 28, le32(r, 28) + (1u << 24)); }},
    {"long_count_missing_at_the_section_end",
     [](std::string& r, const RecordLandmarks& m) {
       // The last INFO value becomes a count-15 vector whose count is cut off.
       r[m.info_values.back()] = static_cast<char>(0xF5);
       r.resize(m.info_values.back() + 1);
       const std::size_t shared_end = r.size();
       set_le32(r, 0, static_cast<std::uint32_t>(shared_end - 8));
       set_le32(r, 4, 0);
       set_le32(r, 28, 0);
     }},
    {"negative_long_count",
     [](std::string& r, const RecordLandmarks& m) {
       // ID "v2" becomes a char vector of count -1: 0xF7, then int8 -1.
       ASSERT_EQ(static_cast<std::uint8_t>(r[m.id]), 0x27);
       r[m.id] = static_cast<char>(0xF7);
       r[m.id + 1] = 0x11;
       r[m.id + 2] = static_cast<char>(-1);
     }},
};


// `stream` as one BGZF file (htslib 1.16 bgzf_write).
void write_as_bgzf(const std::string& stream, const std::string& path) {
  BGZF* file = bgzf_open(path.c_str(), "w");
  ASSERT_NE(file, nullptr);
  EXPECT_EQ(bgzf_write(file, stream.data(), stream.size()), static_cast<ssize_t>(stream.size()));
  EXPECT_EQ(bgzf_close(file), 0);
}

// The file's first record reads; its second is refused as damage.
void expect_second_record_refused(const std::string& path) {
  OpenedBcf bcf(path);
  ASSERT_TRUE(bcf.is_open());
  const std::unique_ptr<PrefetchedBgzf> stream = open_stream(path, bcf.records_start());
  ASSERT_NE(stream, nullptr);
  RecordPtr slot;
  EXPECT_EQ(read_bcf_record(*stream, bcf.header(), slot.record), 0);
  EXPECT_EQ(read_bcf_record(*stream, bcf.header(), slot.record), -2);
}

class BcfPrefetchMalformedRecord : public ::testing::TestWithParam<RecordEdit> {
 protected:
  void SetUp() override {
    dir_ = testing::make_temp_dir(std::string("bcf_prefetch_malformed/") + GetParam().name);
    write_text_file(dir_ + "/small.vcf", kSmallVcf);
    const std::string bcf = write_bcf(dir_ + "/small.vcf", dir_ + "/small.bcf");
    small_ = split_bcf_stream(inflated_by_bgzip(bcf));
    ASSERT_EQ(small_.records.size(), 3u);
  }

  // The header, record 1, record 2 as `edit` leaves it, record 3, as BGZF
  // (htslib 1.16 bgzf_write).
  std::string write_with_edited_second_record(void (*edit)(std::string&, const RecordLandmarks&)) {
    std::string edited = small_.records[1];
    edit(edited, landmarks_of(small_.records[1]));
    const std::string path = dir_ + "/edited.bcf";
    write_as_bgzf(small_.header + small_.records[0] + edited + small_.records[2], path);
    return path;
  }

  std::string dir_;
  SmallBcf small_;
};

// The landmarks walk the records bcftools wrote, end to end, and the
// unedited records read as htslib reads them.
TEST(BcfPrefetchSmallFile, UneditedRecordsMatchHtslib) {
  const std::string dir = testing::make_temp_dir("bcf_prefetch_small");
  write_text_file(dir + "/small.vcf", kSmallVcf);
  const std::string bcf = write_bcf(dir + "/small.vcf", dir + "/small.bcf");
  const SmallBcf small = split_bcf_stream(inflated_by_bgzip(bcf));
  ASSERT_EQ(small.records.size(), 3u);
  for (const std::string& record : small.records) {
    const RecordLandmarks marks = landmarks_of(record);
    EXPECT_EQ(marks.info_keys.size(), 1u);
    EXPECT_EQ(marks.format_keys.size(), 2u);
  }
  int htslib_status = 0, prefetch_status = 0;
  expect_same_records(records_read_by_htslib(bcf, &htslib_status), records_read_by_prefetch(bcf, 0, &prefetch_status));
  EXPECT_EQ(prefetch_status, -1);
}

TEST_P(BcfPrefetchMalformedRecord, IsRefused) {
  expect_second_record_refused(write_with_edited_second_record(GetParam().edit));
}

// Through GenotypeReader, the refusal is a tamis::Error that names the record.
TEST_P(BcfPrefetchMalformedRecord, ReaderNamesTheRecord) {
  const std::string path = write_with_edited_second_record(GetParam().edit);
  GenotypeReaderOptions options;
  options.paths = {path};
  GenotypeReader reader(options);
  RecordBatch batch;
  try {
    while (reader.read_batch(batch, 2) > 0) {
      DosageBlock block;
      batch.decode(block);
    }
    ADD_FAILURE() << "the malformed record was read";
  } catch (const Error& error) {
    EXPECT_EQ(error.code(), ExitCode::genotype_input);
    EXPECT_EQ(error.where(), path + ", record 2 (after 1:100)");
    EXPECT_NE(error.problem().find("damaged or cut short"), std::string::npos) << error.problem();
  }
}

INSTANTIATE_TEST_SUITE_P(Edits, BcfPrefetchMalformedRecord, ::testing::ValuesIn(kRecordEdits),
                         [](const ::testing::TestParamInfo<RecordEdit>& info) { return std::string(info.param.name); });

// A record cut short by the end of the data is damage, not the end.
TEST(BcfPrefetchSmallFile, RecordCutShortIsRefused) {
  const std::string dir = testing::make_temp_dir("bcf_prefetch_cut_record");
  write_text_file(dir + "/small.vcf", kSmallVcf);
  const SmallBcf small = split_bcf_stream(inflated_by_bgzip(write_bcf(dir + "/small.vcf", dir + "/small.bcf")));
  ASSERT_EQ(small.records.size(), 3u);
  for (std::size_t kept : {std::size_t{5}, std::size_t{31}, std::size_t{32}, std::size_t{40}, small.records[1].size() - 1}) {
    SCOPED_TRACE(std::to_string(kept) + " bytes of record 2 kept");
    const std::string path = dir + "/cut" + std::to_string(kept) + ".bcf";
    write_as_bgzf(small.header + small.records[0] + small.records[1].substr(0, kept), path);
    expect_second_record_refused(path);
  }
}

// ---- through GenotypeReader --------------------------------------------------------------

// Reads every record in batches whose sizes cycle through `batch_sizes`,
// with `helpers` threads calling inflate_ahead() meanwhile.
DosageBlock read_all(const std::vector<std::string>& paths, DosageField field,
                     const std::vector<std::size_t>& batch_sizes, int helpers = 0) {
  GenotypeReaderOptions options;
  options.paths = paths;
  options.field = field;
  GenotypeReader reader(options);
  const InflatingHelpers helping(helpers, [&reader] { return reader.inflate_ahead(); });
  DosageBlock all;
  RecordBatch batch;
  for (std::size_t turn = 0; reader.read_batch(batch, batch_sizes[turn % batch_sizes.size()]) > 0; ++turn) {
    batch.decode(all);
  }
  return all;
}

std::uint64_t bits_of(double value) {
  std::uint64_t bits = 0;
  std::memcpy(&bits, &value, sizeof bits);
  return bits;
}

void expect_same_sites_and_dosages(const DosageBlock& expected, const DosageBlock& got) {
  ASSERT_EQ(got.sample_count, expected.sample_count);
  ASSERT_EQ(got.size(), expected.size());
  for (std::size_t site_idx = 0; site_idx < expected.size(); ++site_idx) {
    const VariantSite& want = expected.sites[site_idx];
    const VariantSite& have = got.sites[site_idx];
    ASSERT_EQ(have.chromosome, want.chromosome) << "site " << site_idx;
    ASSERT_EQ(have.position, want.position) << "site " << site_idx;
    ASSERT_EQ(have.id, want.id) << "site " << site_idx;
    ASSERT_EQ(have.ref, want.ref) << "site " << site_idx;
    ASSERT_EQ(have.alt, want.alt) << "site " << site_idx;
    ASSERT_EQ(have.allele_index, want.allele_index) << "site " << site_idx;
    ASSERT_EQ(have.alt_count, want.alt_count) << "site " << site_idx;
    ASSERT_EQ(have.file_index, want.file_index) << "site " << site_idx;
    ASSERT_EQ(have.record_number, want.record_number) << "site " << site_idx;
    ASSERT_EQ(have.source, want.source) << "site " << site_idx;
    ASSERT_EQ(have.has_hard_calls, want.has_hard_calls) << "site " << site_idx;
  }
  ASSERT_EQ(got.dosages.size(), expected.dosages.size());
  for (std::size_t value_idx = 0; value_idx < expected.dosages.size(); ++value_idx) {
    ASSERT_EQ(bits_of(got.dosages[value_idx]), bits_of(expected.dosages[value_idx]))
        << "site " << value_idx / expected.sample_count << ", sample " << value_idx % expected.sample_count << ": "
        << got.dosages[value_idx] << " vs " << expected.dosages[value_idx];
  }
  EXPECT_EQ(got.ploidy, expected.ploidy);
  EXPECT_EQ(got.diploid_calls, expected.diploid_calls);
}

// The simulated cohort as VCF.gz (bgzip 1.16, read by the text path) and as
// BCF (bcftools 1.16 view -Ob, read through the prefetched stream).
class BcfPrefetchReader : public ::testing::Test {
 protected:
  void SetUp() override {
    const ::testing::TestInfo* info = ::testing::UnitTest::GetInstance()->current_test_info();
    dir_ = testing::make_temp_dir(std::string("bcf_prefetch_reader/") + info->name());
  }

  // VCF.gz and BCF copies of a simulated cohort; returns {vcf_gz, bcf}.
  std::pair<std::string, std::string> write_cohort(const std::string& name, const CohortShape& shape) {
    const std::string vcf = dir_ + "/" + name + ".vcf";
    write_text_file(vcf, simulated_vcf(shape));
    EXPECT_EQ(run_command("bgzip -c " + quoted(vcf) + " > " + quoted(vcf + ".gz")), 0);
    return {vcf + ".gz", write_bcf(vcf, dir_ + "/" + name + ".bcf")};
  }

  std::string dir_;
};

const std::vector<std::size_t> kVariedBatchSizes = {1, 7, 64, 3, 250, 2, 33};

TEST_F(BcfPrefetchReader, GivesTheDosagesOfTheVcfGzCopy) {
  const auto [vcf_gz, bcf] = write_cohort("cohort", {400, 40, 23, false});
  for (DosageField field : {DosageField::automatic, DosageField::gt}) {
    SCOPED_TRACE(dosage_field_name(field));
    const DosageBlock from_vcf_gz = read_all({vcf_gz}, field, {100});
    ASSERT_EQ(from_vcf_gz.sample_count, 40u);
    ASSERT_GT(from_vcf_gz.size(), 400u);  // multi-allelic records give a site per ALT
    expect_same_sites_and_dosages(from_vcf_gz, read_all({bcf}, field, kVariedBatchSizes));
  }
}

TEST_F(BcfPrefetchReader, GivesTheSameDosagesWhileThreadsInflateAhead) {
  // Enough records for many chunks, so that helpers find work.
  const auto [vcf_gz, bcf] = write_cohort("cohort", {2500, 60, 29, false});
  const DosageBlock from_vcf_gz = read_all({vcf_gz}, DosageField::automatic, {100});
  ASSERT_GT(from_vcf_gz.size(), 2500u);
  for (int helpers : {1, 2}) {
    SCOPED_TRACE(std::to_string(helpers) + " helper(s)");
    expect_same_sites_and_dosages(from_vcf_gz, read_all({bcf}, DosageField::automatic, kVariedBatchSizes, helpers));
  }
}

// Two files in one reader: the first to its end, then the second, each
// counting its own records; batches run across the boundary.
TEST_F(BcfPrefetchReader, ReadsTwoBcfFilesInOrder) {
  const auto [first_vcf_gz, first_bcf] = write_cohort("first", {300, 20, 31, false});
  const auto [second_vcf_gz, second_bcf] = write_cohort("second", {200, 20, 37, false});
  DosageBlock expected = read_all({first_vcf_gz}, DosageField::automatic, {100});
  const DosageBlock second = read_all({second_vcf_gz}, DosageField::automatic, {100});
  ASSERT_GT(expected.size(), 300u);
  for (VariantSite site : second.sites) {
    site.file_index = 1;
    expected.sites.push_back(site);
  }
  expected.dosages.insert(expected.dosages.end(), second.dosages.begin(), second.dosages.end());
  expected.ploidy.insert(expected.ploidy.end(), second.ploidy.begin(), second.ploidy.end());
  expected.diploid_calls.insert(expected.diploid_calls.end(), second.diploid_calls.begin(),
                                second.diploid_calls.end());
  expect_same_sites_and_dosages(expected, read_all({first_bcf, second_bcf}, DosageField::automatic, {1, 77, 5, 250}));
  EXPECT_EQ(read_all({first_bcf, second_bcf}, DosageField::automatic, {1000}, 2).size(), expected.size());
}

// A header-only BCF (bcftools 1.16 view -Ob of a VCF without records) reads
// as no records, not as damage.
TEST_F(BcfPrefetchReader, HeaderOnlyBcfHasNoRecords) {
  const auto [vcf_gz, bcf] = write_cohort("empty", {0, 12, 41, false});
  EXPECT_EQ(read_all({bcf}, DosageField::automatic, {10}).size(), 0u);
  EXPECT_EQ(read_all({bcf, bcf}, DosageField::automatic, {10}, 1).size(), 0u);
}

// A BCF read from a pipe (a FIFO here; `--genotypes <(bcftools view -Ob ...)`
// is the same for the reader) must read like the file itself, as a
// compressed VCF through a pipe does. A pipe cannot be opened a second time
// at the records' start (once, that gave no records and no error), so only
// regular files are prefetched.
TEST_F(BcfPrefetchReader, ReadsABcfFromAPipe) {
  const auto [vcf_gz, bcf] = write_cohort("cohort", {300, 20, 43, false});
  const DosageBlock from_file = read_all({bcf}, DosageField::automatic, {50});
  const std::string fifo = dir_ + "/cohort_pipe.bcf";
  ASSERT_EQ(run_command("mkfifo " + quoted(fifo)), 0);
  // The writer waits for the reader; the time limit ends it if none comes.
  ASSERT_EQ(run_command("(timeout 600 cat " + quoted(bcf) + " > " + quoted(fifo) + " 2>/dev/null &)"), 0);
  try {
    expect_same_sites_and_dosages(from_file, read_all({fifo}, DosageField::automatic, {50}));
  } catch (const Error& error) {
    ADD_FAILURE() << error.where() << ": " << error.problem();
  }
}

}  // namespace
}  // namespace tamis
