// The genotype reader on its own: reads and decodes every record of a file
// the way the scan does (read_batch serially, decode in parallel), without
// any statistics, and prints the seconds taken and a checksum of the dosages.
//
// Usage: read_throughput FILE [DECODE_THREADS [RECORDS_PER_BATCH]]
// With DECODE_THREADS = 0 the reading thread also decodes.
#include <atomic>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdio>
#include <cstdlib>
#include <deque>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace {

double sum_dosages(const tamis::DosageBlock& block) {
  double sum = 0.0;
  for (double value : block.dosages) {
    if (!std::isnan(value)) sum += value;
  }
  return sum;
}

// A bounded queue of batches between the reading thread and the decoders.
class BatchQueue {
 public:
  explicit BatchQueue(std::size_t limit) : limit_(limit) {}
  void push(tamis::RecordBatch batch) {
    std::unique_lock<std::mutex> lock(mutex_);
    room_.wait(lock, [&] { return batches_.size() < limit_; });
    batches_.push_back(std::move(batch));
    ready_.notify_one();
  }
  bool pop(tamis::RecordBatch& batch) {
    std::unique_lock<std::mutex> lock(mutex_);
    ready_.wait(lock, [&] { return !batches_.empty() || closed_; });
    if (batches_.empty()) return false;
    batch = std::move(batches_.front());
    batches_.pop_front();
    room_.notify_one();
    return true;
  }
  void close() {
    std::lock_guard<std::mutex> lock(mutex_);
    closed_ = true;
    ready_.notify_all();
  }

 private:
  std::size_t limit_;
  std::deque<tamis::RecordBatch> batches_;
  bool closed_ = false;
  std::mutex mutex_;
  std::condition_variable ready_, room_;
};

}  // namespace

int main(int argc, char** argv) {
  if (argc < 2) {
    std::fprintf(stderr, "usage: %s FILE [DECODE_THREADS [RECORDS_PER_BATCH]]\n", argv[0]);
    return 2;
  }
  const int decode_threads = argc > 2 ? std::atoi(argv[2]) : 0;
  const std::size_t batch_records = argc > 3 ? std::strtoul(argv[3], nullptr, 10) : 128;
  const auto start = std::chrono::steady_clock::now();
  try {
    tamis::GenotypeReaderOptions options;
    options.paths = {argv[1]};
    options.io_threads = decode_threads > 0 ? 1 : 0;
    tamis::GenotypeReader reader(options);
    std::atomic<std::size_t> sites{0};
    double checksum = 0.0;
    std::mutex checksum_mutex;
    std::string decode_error;
    if (decode_threads == 0) {
      tamis::RecordBatch batch;
      tamis::DosageBlock block;
      while (reader.read_batch(batch, batch_records) > 0) {
        block.clear();
        batch.decode(block);
        sites += block.size();
        checksum += sum_dosages(block);
      }
    } else {
      BatchQueue queue(static_cast<std::size_t>(decode_threads) * 3);
      std::vector<std::thread> decoders;
      for (int thread_idx = 0; thread_idx < decode_threads; ++thread_idx) {
        decoders.emplace_back([&] {
          tamis::RecordBatch batch;
          tamis::DosageBlock block;
          double local = 0.0;
          try {
            while (queue.pop(batch)) {
              reader.inflate_ahead();  // as the scan's workers do
              block.clear();
              batch.decode(block);
              sites += block.size();
              local += sum_dosages(block);
            }
          } catch (const tamis::Error& error) {
            std::lock_guard<std::mutex> lock(checksum_mutex);
            if (decode_error.empty()) decode_error = error.what();
            while (queue.pop(batch)) {
            }  // let the reader finish
          }
          std::lock_guard<std::mutex> lock(checksum_mutex);
          checksum += local;
        });
      }
      // The decoders are joined whatever happens to the reading.
      struct Joiner {
        BatchQueue& queue;
        std::vector<std::thread>& decoders;
        ~Joiner() {
          queue.close();
          for (std::thread& decoder : decoders) decoder.join();
        }
      } joiner{queue, decoders};
      while (true) {
        tamis::RecordBatch batch;
        if (reader.read_batch(batch, batch_records) == 0) break;
        queue.push(std::move(batch));
      }
    }
    if (!decode_error.empty()) {
      std::fprintf(stderr, "%s\n", decode_error.c_str());
      return 1;
    }
    const double seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    std::printf("%zu sites, dosage sum %.6f, %.3f s\n", sites.load(), checksum, seconds);
  } catch (const tamis::Error& error) {
    std::fprintf(stderr, "%s\n", error.what());
    return 1;
  }
  return 0;
}
