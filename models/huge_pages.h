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
#include <cstdlib>  // also defines __GLIBC__
#include <vector>

#if defined(__linux__)
#include <sys/mman.h>
#include <unistd.h>
#endif
#if defined(__GLIBC__)
#include <malloc.h>
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

// For a batch process (fit, apply, calibrate, ...): large blocks come from
// the heap, are kept there when freed and are reused, and the heap itself is
// advised for huge pages. glibc otherwise maps every block of 128 kB or more
// freshly and unmaps it on free, so each full-length temporary of a fit pays
// its first-touch faults again. Measured on the project's VM (100 Hz box,
// `fluxtrim fit`): 13,500 -> ~800 minor faults, 0.29 -> 0.14 s wall. The
// cost: memory freed during the run is returned to the system only at exit,
// and the heap reserves (does not touch) heap_pad bytes of address space.
// Call once at the start of main, before large allocations. Values are the
// same with or without it.
inline void ConfigureBatchHeap(std::size_t heap_pad = std::size_t{512} << 20) {
#if defined(__GLIBC__) && defined(__linux__)
  mallopt(M_MMAP_THRESHOLD, 32 << 20);  // glibc's maximum on 64-bit
  mallopt(M_TRIM_THRESHOLD, 1 << 30);
  mallopt(M_TOP_PAD, static_cast<int>(heap_pad));
  mallopt(M_ARENA_MAX, 1);  // worker threads allocate from the same heap
  // Grow the heap by heap_pad now (a block larger than the start-up heap's
  // free top) and advise that range.
  void* const before = sbrk(0);
  void* const block = std::malloc(std::size_t{1} << 20);
  asm volatile("" : : "r"(block) : "memory");  // keep the pair from being elided
  void* const after = sbrk(0);
  if (before != reinterpret_cast<void*>(-1) && after > before) {
    AdviseHugePages(before, static_cast<std::size_t>(static_cast<char*>(after) -
                                                     static_cast<char*>(before)));
  }
  std::free(block);
#else
  (void)heap_pad;
#endif
}

}  // namespace fluxtrim::models
