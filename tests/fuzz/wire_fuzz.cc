// Fuzz entry point for the inbound tick decoder, the bar builder fed with what
// it decodes, and the binary/JSON update decoders.
// Input layout: byte 0 = mode bits (bit 0: binary encoding, bit 1: batch frame
// "*"), byte 1 = symbol frame length (mod 40), then the frame, then the body.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <string>

#include "aftershock/bar_builder.h"
#include "aftershock/update_codec.h"
#include "aftershock/wire.h"
#include "fuzz_common.h"

namespace {

using aftershock::Tick;

void CheckTick(const Tick& t) {
  FUZZ_CHECK(aftershock::IsValidSymbol(t.symbol.view()));
  FUZZ_CHECK(t.t_ns >= 0);
  FUZZ_CHECK(std::isfinite(t.value));
  FUZZ_CHECK(std::isfinite(t.size) && t.size >= 0);
  FUZZ_CHECK(t.kind == Tick::kPrice || t.kind == Tick::kReturn);
  if (t.kind == Tick::kPrice) FUZZ_CHECK(t.value > 0);
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  if (size < 2) return 0;
  const bool binary = (data[0] & 1) != 0;
  const bool batch = (data[0] & 2) != 0;
  size_t frame_len = data[1] % 40;
  if (frame_len > size - 2) frame_len = size - 2;
  const char* p = reinterpret_cast<const char*>(data + 2);
  const std::string frame = batch ? std::string("*") : std::string(p, frame_len);
  const absl::string_view body(p + frame_len, size - 2 - frame_len);

  static Tick out[64];
  aftershock::RejectCounters counters;
  const auto enc = binary ? aftershock::WireEncoding::kBinary : aftershock::WireEncoding::kJson;
  const aftershock::DecodeResult r =
      aftershock::DecodeTicks(frame, body, enc, 1 << 16, absl::Span<Tick>(out, 64), &counters);
  FUZZ_CHECK(r.n_ticks >= 0 && r.n_ticks <= 64);
  FUZZ_CHECK(counters.Total() == static_cast<uint64_t>(r.n_rejected));

  // Round trip: what was decoded re-encodes and decodes to the same ticks.
  if (r.n_ticks > 0) {
    std::string again;
    aftershock::EncodeBatchBinary(absl::Span<const Tick>(out, r.n_ticks), &again);
    static Tick back[64];
    aftershock::RejectCounters c2;
    const auto r2 = aftershock::DecodeTicks("*", again, aftershock::WireEncoding::kBinary, 1 << 20,
                                            absl::Span<Tick>(back, 64), &c2);
    FUZZ_CHECK(r2.n_ticks == r.n_ticks);
    aftershock::EncodeBatchJson(absl::Span<const Tick>(out, r.n_ticks), &again);
    static Tick json_back[64];
    const auto r3 = aftershock::DecodeTicks("*", again, aftershock::WireEncoding::kJson, 1 << 20,
                                            absl::Span<Tick>(json_back, 64), &c2);
    FUZZ_CHECK(r3.n_ticks == r.n_ticks);
    FUZZ_CHECK(c2.Total() == 0);
    for (int i = 0; i < r.n_ticks; ++i) {
      CheckTick(out[i]);
      FUZZ_CHECK(back[i].t_ns == out[i].t_ns && back[i].value == out[i].value);
      FUZZ_CHECK(json_back[i].t_ns == out[i].t_ns && json_back[i].value == out[i].value &&
                 json_back[i].size == out[i].size && json_back[i].symbol == out[i].symbol);
    }
  }

  // The bar builder never yields a non-finite return from valid ticks.
  aftershock::BarState state;
  aftershock::BarOptions options;
  // Mode bits 2..7 pick the bar options; the offset and interval come from
  // the same byte so the corpus explores them without a longer header.
  options.interval_ns = (data[0] & 4) ? int64_t{1000} << (data[0] >> 5) * 7 : 0;
  options.session.enabled = (data[0] & 8) != 0;
  options.session.start_minute = 60;
  options.session.end_minute = (data[0] & 16) ? 30 : 1000;
  options.session.tz_offset_minutes = (data[0] & 32) ? 1440 : -1440;
  for (int i = 0; i < r.n_ticks; ++i) {
    const aftershock::FeedResult f = aftershock::FeedTick(&state, out[i], options);
    if (f.closed) FUZZ_CHECK(std::isfinite(f.bar.ret));
  }
  aftershock::ClosedBar bar;
  if (aftershock::CloseIfDue(&state, INT64_MAX / 2, 0, options, &bar)) {
    FUZZ_CHECK(std::isfinite(bar.ret));
  }

  // Update decoders: a decoded update re-encodes to the identical bytes.
  aftershock::BarUpdate u;
  if (aftershock::DecodeUpdateBinary(body, &u).ok()) {
    std::string again;
    FUZZ_CHECK(aftershock::EncodeUpdateBinary(u, &again).ok());
    FUZZ_CHECK(again == std::string(body));
  }
  if (aftershock::DecodeUpdateJson(body, &u).ok()) {
    std::string again;
    FUZZ_CHECK(aftershock::EncodeUpdateJson(u, &again).ok());
    aftershock::BarUpdate v;
    FUZZ_CHECK(aftershock::DecodeUpdateJson(again, &v).ok());
    FUZZ_CHECK(v.t_ns == u.t_ns && v.z == u.z && v.flags == u.flags);
  }
  return 0;
}
