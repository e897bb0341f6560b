// NameIndex: finds an item by its name in one probe of a flat table, for the
// per-reading series lookup. Open addressing with linear probing over a
// power-of-two table of {hash, item} slots, at most half full, erase by
// backward shift (Knuth, TAOCP vol. 3, 6.4, Algorithm R). It does not own the
// items: each T outlives its entry and has a `name` member that does not change
// while indexed. Not thread-safe; owned with the items it indexes.
//
// Why not std::unordered_map: its lookup walks from a bucket to the node before
// the first node, then to the node, each a cache miss once the series' state
// outgrows the caches (a tenth of a 10,000-series replay went there). Here the
// slots are 16 bytes each, contiguous, and a lookup reads one slot and the item.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <string_view>
#include <vector>

namespace plumbline {

template <typename T>
class NameIndex {
 public:
  // The item named `name`, or nullptr.
  T* Find(std::string_view name) const {
    if (slots_.empty()) return nullptr;
    const std::uint64_t hash = Hash(name);
    for (std::size_t i = hash & mask(); slots_[i].item; i = (i + 1) & mask()) {
      if (slots_[i].hash == hash && slots_[i].item->name == name) return slots_[i].item;
    }
    return nullptr;
  }

  // Prefetch stages for a lookup of `name` some steps later (each a hint):
  // its home slot; then, with the slot in cache, the item its hash finds
  // there (the name is compared only by Find).
  void PrefetchSlot(std::string_view name) const {
    if (slots_.empty()) return;
    __builtin_prefetch(&slots_[Hash(name) & mask()]);
  }
  void PrefetchItem(std::string_view name) const {
    if (slots_.empty()) return;
    const std::uint64_t hash = Hash(name);
    for (std::size_t i = hash & mask(); slots_[i].item; i = (i + 1) & mask()) {
      if (slots_[i].hash == hash) {
        __builtin_prefetch(slots_[i].item);
        return;
      }
    }
  }
  // Indexes `item` under item->name, which no indexed item may have already.
  void Insert(T* item) {
    if (2 * (size_ + 1) > slots_.size()) Grow();
    Place({Hash(item->name), item});
    ++size_;
  }

  // Removes `item` (indexed under item->name); true if it was indexed.
  bool Erase(const T* item) {
    if (slots_.empty()) return false;
    std::size_t i = Hash(item->name) & mask();
    while (slots_[i].item != item) {
      if (!slots_[i].item) return false;
      i = (i + 1) & mask();
    }
    // Backward shift: move up each later entry of the run whose home slot does
    // not lie cyclically in (i, j], so no probe sequence crosses a hole.
    for (std::size_t j = (i + 1) & mask(); slots_[j].item; j = (j + 1) & mask()) {
      const std::size_t home = slots_[j].hash & mask();
      const bool stays = i <= j ? (i < home && home <= j) : (i < home || home <= j);
      if (stays) continue;
      slots_[i] = slots_[j];
      i = j;
    }
    slots_[i] = Slot{};
    --size_;
    return true;
  }

  void Clear() {
    slots_.clear();
    size_ = 0;
  }

  std::size_t size() const { return size_; }

 private:
  struct Slot {
    std::uint64_t hash = 0;
    T* item = nullptr;  // nullptr: empty
  };
  static std::uint64_t Hash(std::string_view name) {
    return std::hash<std::string_view>{}(name);
  }
  std::size_t mask() const { return slots_.size() - 1; }
  void Place(Slot slot) {
    std::size_t i = slot.hash & mask();
    while (slots_[i].item) i = (i + 1) & mask();
    slots_[i] = slot;
  }
  void Grow() {
    std::vector<Slot> old(slots_.empty() ? 16 : 2 * slots_.size());
    old.swap(slots_);
    for (const Slot& slot : old) {
      if (slot.item) Place(slot);
    }
  }

  std::vector<Slot> slots_;
  std::size_t size_ = 0;
};

}  // namespace plumbline
