// Fuzz entry point for the checkpoint container reader. Any input either
// parses into sections that lie inside the input, or is refused with a
// message; a parsed file serializes back to the same bytes.
#include <cstddef>
#include <cstdint>
#include <string>
#include <utility>
#include <vector>

#include "aftershock/checkpoint_file.h"
#include "fuzz_common.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  if (size > 1 << 20) return 0;
  std::string bytes(reinterpret_cast<const char*>(data), size);
  auto cp = aftershock::ParseCheckpoint(bytes);
  if (!cp.ok()) {
    FUZZ_CHECK(!cp.status().message().empty());
    return 0;
  }
  std::vector<std::pair<uint32_t, absl::string_view>> sections;
  size_t total = 0;
  for (int i = 0; i < cp->num_sections(); ++i) {
    sections.emplace_back(cp->tag(i), cp->payload(i));
    total += cp->payload(i).size();
  }
  FUZZ_CHECK(total <= size);
  auto again = aftershock::SerializeCheckpoint(cp->header(), sections);
  FUZZ_CHECK(again.ok());
  FUZZ_CHECK(*again == bytes);
  return 0;
}
