// What the CPU the process runs on can execute, for the few kernels that have
// a wider path than the build's baseline (x86-64: SSE2). A kernel compiled
// for AVX with __attribute__((target("avx"))) may only be called when
// CpuHasAvx() is true; the build itself stays baseline, so one binary runs on
// any x86-64.
//
// Thread-safety: the functions are safe to call from any thread.
#ifndef AFTERSHOCK_MODELS_CPU_FEATURES_H_
#define AFTERSHOCK_MODELS_CPU_FEATURES_H_

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
// Functions may carry __attribute__((target("avx"))).
#define AFTERSHOCK_HAVE_AVX_TARGET 1
#endif

#include <atomic>

namespace aftershock {
namespace internal {

// Tests only: while true, CpuHasAvx() answers false, so that a test can run
// the baseline paths on a CPU that has AVX and compare them with the wide ones.
inline std::atomic<bool>& AvxDisabledForTesting() {
  static std::atomic<bool> disabled{false};
  return disabled;
}

// True when AVX instructions may run (CPU and operating system support) and a
// test has not disabled them. Callers ask once per object or call (the
// filter bank when it is made, the seasonal smoother once per estimate).
inline bool CpuHasAvx() {
#if defined(AFTERSHOCK_HAVE_AVX_TARGET)
  if (AvxDisabledForTesting().load(std::memory_order_relaxed)) return false;
  __builtin_cpu_init();  // a caller may run before libgcc's constructor did
  return __builtin_cpu_supports("avx");
#else
  return false;
#endif
}

}  // namespace internal
}  // namespace aftershock

#endif  // AFTERSHOCK_MODELS_CPU_FEATURES_H_
