// Counts heap allocations made through the global operator new, so tests can
// assert that a hot path allocates nothing. The replacement operators live in
// alloc_counter.cc and are linked into every test executable; they only count.
#ifndef AFTERSHOCK_TESTS_SUPPORT_ALLOC_COUNTER_H_
#define AFTERSHOCK_TESTS_SUPPORT_ALLOC_COUNTER_H_

#include <cstdint>

namespace aftershock::testing {

// Number of global operator new calls so far in this process (all threads).
uint64_t AllocationCount();

// Number of global operator new calls made so far by the calling thread (0 in
// ThreadSanitizer builds): for a check of one thread's path while other
// threads (refit workers) may allocate.
uint64_t ThreadAllocationCount();

// Number of global operator delete calls with a non-null pointer made so far
// by the calling thread (0 in ThreadSanitizer builds, see below).
uint64_t ThreadReleaseCount();

// False in ThreadSanitizer builds, whose runtime owns operator new: there the
// count stays 0 and allocation checks should be skipped.
bool AllocationCountingEnabled();

}  // namespace aftershock::testing

#endif  // AFTERSHOCK_TESTS_SUPPORT_ALLOC_COUNTER_H_
