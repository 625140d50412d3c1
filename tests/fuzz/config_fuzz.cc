// Fuzz entry point for the TOML configuration parser. A document that parses
// must format and parse again to the same configuration.
#include <cstddef>
#include <cstdint>
#include <string>

#include "aftershock/engine_config.h"
#include "fuzz_common.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  if (size > 1 << 16) return 0;
  const absl::string_view text(reinterpret_cast<const char*>(data), size);
  auto c = aftershock::ParseEngineConfig(text, "fuzz.toml");
  if (!c.ok()) {
    FUZZ_CHECK(!c.status().message().empty());
    return 0;
  }
  const std::string formatted = aftershock::FormatEngineConfig(*c);
  auto again = aftershock::ParseEngineConfig(formatted, "formatted.toml");
  FUZZ_CHECK(again.ok());
  FUZZ_CHECK(aftershock::FormatEngineConfig(*again) == formatted);
  return 0;
}
