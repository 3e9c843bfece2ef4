#include "output/temporary_registry.hpp"

#include <unistd.h>

#include <atomic>
#include <cstring>
#include <mutex>

#include "tamis/results_writer.hpp"

namespace tamis {

namespace output_detail {

namespace {

constexpr int slot_count = 256;
constexpr std::size_t slot_path_size = 4096;

struct TemporarySlot {
  std::atomic<bool> in_use{false};
  char path[slot_path_size];
};

TemporarySlot slots[slot_count];
std::mutex registration_mutex;

static_assert(std::atomic<bool>::is_always_lock_free,
              "the signal handler reads the slot flags without locking");

}  // namespace

int register_temporary(const std::string& path) {
  if (path.size() >= slot_path_size) return -1;
  std::lock_guard<std::mutex> lock(registration_mutex);
  for (int slot_idx = 0; slot_idx < slot_count; ++slot_idx) {
    TemporarySlot& slot = slots[slot_idx];
    if (slot.in_use.load(std::memory_order_relaxed)) continue;
    std::memcpy(slot.path, path.c_str(), path.size() + 1);
    // Published only once the name is complete, so a handler never sees half of it.
    slot.in_use.store(true, std::memory_order_release);
    return slot_idx;
  }
  return -1;
}

void unregister_temporary(int slot) {
  if (slot < 0 || slot >= slot_count) return;
  std::lock_guard<std::mutex> lock(registration_mutex);
  slots[slot].in_use.store(false, std::memory_order_release);
}

}  // namespace output_detail

void remove_registered_temporaries() noexcept {
  for (auto& slot : output_detail::slots) {
    if (slot.in_use.load(std::memory_order_acquire)) unlink(slot.path);
  }
}

}  // namespace tamis
