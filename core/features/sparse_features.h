// A sparse feature vector: the active entries of the pool's feature table for one frame.
#ifndef BELLWETHER_CORE_FEATURES_SPARSE_FEATURES_H_
#define BELLWETHER_CORE_FEATURES_SPARSE_FEATURES_H_

#include <cstdint>
#include <cstddef>
#include <vector>

namespace bellwether {

// Active feature indices with their values. Capacity is reserved once (the recipe's
// maximum active count), so filling it per frame never allocates.
struct SparseFeatures {
  std::vector<uint32_t> index;
  std::vector<float> value;

  void Reserve(size_t n) {
    index.reserve(n);
    value.reserve(n);
  }
  void Clear() {
    index.clear();
    value.clear();
  }
  void Add(uint32_t i, float v) {
    index.push_back(i);
    value.push_back(v);
  }
  size_t size() const { return index.size(); }
  bool empty() const { return index.empty(); }
};

}  // namespace bellwether

#endif  // BELLWETHER_CORE_FEATURES_SPARSE_FEATURES_H_
