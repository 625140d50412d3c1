#include "support/alloc_counter.h"

#include <atomic>
#include <cstdlib>
#include <new>

// ThreadSanitizer's runtime defines the global operator new itself (clang links
// it statically), so under TSan the counter is off and the operators below are
// not defined; the allocation checks run in the ordinary builds.
#if defined(__has_feature)
#if __has_feature(thread_sanitizer)
#define AFTERSHOCK_ALLOC_COUNTER_OFF 1
#endif
#endif
#if defined(__SANITIZE_THREAD__)
#define AFTERSHOCK_ALLOC_COUNTER_OFF 1
#endif

namespace {
std::atomic<uint64_t> g_allocations{0};
// Trivially constructed and destructible: usable from operator new and delete
// at any point of a thread's life.
thread_local uint64_t t_allocations = 0;
thread_local uint64_t t_releases = 0;
}  // namespace

namespace aftershock::testing {
uint64_t AllocationCount() { return g_allocations.load(std::memory_order_relaxed); }
uint64_t ThreadAllocationCount() { return t_allocations; }
uint64_t ThreadReleaseCount() { return t_releases; }
#ifdef AFTERSHOCK_ALLOC_COUNTER_OFF
bool AllocationCountingEnabled() { return false; }
#else
bool AllocationCountingEnabled() { return true; }
#endif
}  // namespace aftershock::testing

#ifndef AFTERSHOCK_ALLOC_COUNTER_OFF

namespace {
// Counts one allocation (process and thread); null when malloc fails.
void* Allocate(std::size_t n) noexcept {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  ++t_allocations;
  return std::malloc(n ? n : 1);
}
void* AllocateOrThrow(std::size_t n) {
  if (void* p = Allocate(n)) return p;
  throw std::bad_alloc();
}
void Release(void* p) noexcept {
  if (p != nullptr) ++t_releases;
  std::free(p);
}
}  // namespace
void* operator new(std::size_t n) { return AllocateOrThrow(n); }
void* operator new[](std::size_t n) { return AllocateOrThrow(n); }
void* operator new(std::size_t n, const std::nothrow_t&) noexcept { return Allocate(n); }
void* operator new[](std::size_t n, const std::nothrow_t&) noexcept { return Allocate(n); }
void operator delete(void* p, const std::nothrow_t&) noexcept { Release(p); }
void operator delete[](void* p, const std::nothrow_t&) noexcept { Release(p); }
void operator delete(void* p) noexcept { Release(p); }
void operator delete[](void* p) noexcept { Release(p); }
void operator delete(void* p, std::size_t) noexcept { Release(p); }
void operator delete[](void* p, std::size_t) noexcept { Release(p); }
#endif  // AFTERSHOCK_ALLOC_COUNTER_OFF
