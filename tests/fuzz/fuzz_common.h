// Shared by the fuzz entry points: a check that aborts (so libFuzzer and the
// corpus replay report it) when an invariant of the code under test fails.
#ifndef AFTERSHOCK_TESTS_FUZZ_FUZZ_COMMON_H_
#define AFTERSHOCK_TESTS_FUZZ_FUZZ_COMMON_H_

#include <cstdio>
#include <cstdlib>

#define FUZZ_CHECK(cond)                                                                \
  do {                                                                                  \
    if (!(cond)) {                                                                      \
      std::fprintf(stderr, "%s:%d: invariant failed: %s\n", __FILE__, __LINE__, #cond); \
      std::abort();                                                                     \
    }                                                                                   \
  } while (0)

#endif  // AFTERSHOCK_TESTS_FUZZ_FUZZ_COMMON_H_
