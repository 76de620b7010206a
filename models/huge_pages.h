#pragma once
// Transparent huge pages for large, not yet touched buffers (as NumPy does
// for its large arrays): one page fault per 2 MB instead of per 4 kB. On a
// virtual machine a 4 kB first-touch fault costs microseconds (about 3.5 ms
// of CPU per MB measured on the project's 2-core VM), more than the
// arithmetic done on the data. Advice only: without Linux or THP nothing
// changes, and values are the same either way. Buffers below 4 MB hold no
// whole aligned 2 MB page and are left alone.

#include <cstddef>
#include <cstdint>
#include <vector>

#if defined(__linux__)
#include <sys/mman.h>
#endif

namespace fluxtrim::models {

inline void AdviseHugePages(void* data, std::size_t bytes) {
#if defined(__linux__) && defined(MADV_HUGEPAGE)
  constexpr std::uintptr_t kHuge = std::uintptr_t{1} << 21;
  if (bytes < 2 * kHuge) return;
  const std::uintptr_t begin =
      (reinterpret_cast<std::uintptr_t>(data) + kHuge - 1) & ~(kHuge - 1);
  const std::uintptr_t end =
      (reinterpret_cast<std::uintptr_t>(data) + bytes) & ~(kHuge - 1);
  if (end > begin) {
    madvise(reinterpret_cast<void*>(begin), end - begin, MADV_HUGEPAGE);
  }
#else
  (void)data;
  (void)bytes;
#endif
}

// std::vector<T>(n, value), its storage advised before the first touch.
template <typename T>
std::vector<T> HugeVector(std::size_t n, const T& value) {
  std::vector<T> v;
  v.reserve(n);
  AdviseHugePages(v.data(), n * sizeof(T));
  v.assign(n, value);
  return v;
}

// v.assign(n, value) with the same advice when v must grow.
template <typename T>
void HugeAssign(std::vector<T>* v, std::size_t n, const T& value) {
  if (v->capacity() < n) *v = HugeVector(n, value);
  else v->assign(n, value);
}

}  // namespace fluxtrim::models
