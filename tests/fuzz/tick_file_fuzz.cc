// Fuzz entry point for the tick CSV reader: every tick it yields is valid,
// and the counts add up.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <string>

#include "aftershock/tick_file.h"
#include "fuzz_common.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  if (size > 1 << 16) return 0;
  aftershock::TickFileOptions options;
  options.stop_at_first_error = size > 0 && (data[0] & 1) != 0;
  auto r = aftershock::TickFileReader::FromString(
      std::string(reinterpret_cast<const char*>(data), size), "fuzz.csv", options);
  if (!r.ok()) return 0;
  aftershock::Tick t;
  int64_t n = 0;
  while ((*r)->Next(&t)) {
    ++n;
    FUZZ_CHECK(aftershock::IsValidSymbol(t.symbol.view()));
    FUZZ_CHECK(t.t_ns >= 0);
    FUZZ_CHECK(std::isfinite(t.value));
    if (t.kind == aftershock::Tick::kPrice) FUZZ_CHECK(t.value > 0);
    FUZZ_CHECK(std::isnan(t.rv) || (std::isfinite(t.rv) && t.rv >= 0));
  }
  FUZZ_CHECK(n == (*r)->good_lines());
  FUZZ_CHECK((*r)->errors().size() <= static_cast<size_t>(aftershock::kMaxKeptErrors));
  if (n == 0 && (*r)->bad_lines() > 0) FUZZ_CHECK(!(*r)->status().ok());
  return 0;
}
