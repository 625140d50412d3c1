#include "aftershock/config_check.h"

#include <algorithm>
#include <cmath>
#include <utility>

#include "absl/strings/str_cat.h"
#include "absl/strings/str_format.h"

namespace aftershock {
namespace {

std::string BarsText(const BarsConfig& b) {
  std::string s = absl::StrCat("[bars] interval \"", FormatDuration(b.interval_ns), "\"");
  if (b.session.enabled) {
    absl::StrAppendFormat(&s, " with a %02d:%02d-%02d:%02d session", b.session.start_minute / 60,
                          b.session.start_minute % 60, b.session.end_minute / 60,
                          b.session.end_minute % 60);
  }
  return s;
}

// What to look at when a reason dominates the rejects.
const char* RejectHint(RejectReason r, const EngineConfig& c) {
  switch (r) {
    case RejectReason::kOutsideSession:
      return "check [bars] session and timezone_offset_minutes against the ticks' times";
    case RejectReason::kTooOld:
      return "the ticks arrive out of order: check the feed or raise [bars] max_lateness";
    case RejectReason::kMalformedJson:
      return "the producer does not send JSON: set [feed] encoding to what it sends";
    case RejectReason::kMalformedBinary:
      return c.feed.encoding == WireEncoding::kBinary
                 ? "the producer does not send binary frames (`aftershock simulate --publish` "
                   "sends JSON unless --encoding binary): set [feed] encoding = \"json\""
                 : "check [feed] encoding";
    case RejectReason::kKindMismatch:
      return "a symbol mixes price and return ticks";
    case RejectReason::kSymbolLimit:
      return "raise [limits] max_symbols";
    case RejectReason::kOversize:
      return "raise [feed] max_message_bytes";
    default:
      return "see the rejects by reason in the metrics";
  }
}

}  // namespace

std::vector<std::string> ConfigWarnings(const EngineConfig& c, const RunFacts& f) {
  std::vector<std::string> out;
  const int64_t interval = c.bars.interval_ns;
  const bool refits_on = c.refit.every_bars > 0 || c.refit.every_seconds > 0;

  // ---- Scale-out: each partition has its own engine state, so what pools
  // across symbols pools within a partition only.
  if (c.feed.source == FeedSource::kNats && refits_on && c.refit.group_models &&
      !c.model.has_params) {
    out.push_back(
        "[refit] group_models with [feed] source = \"nats\": a symbol's group model comes from "
        "the symbols of its own partition, so `pooled` updates differ from a single-process "
        "run; set group_models = false for output equal to `aftershock replay`");
  }

  // ---- Annualization against the bar layout.
  const double auto_ppy = AutoPeriodsPerYear(c.bars);
  const double ppy = c.outputs.periods_per_year;
  if (interval > 0 && !c.outputs.periods_per_year_auto &&
      (ppy > 1.5 * auto_ppy || ppy < auto_ppy / 1.5)) {
    out.push_back(absl::StrFormat(
        "[outputs] periods_per_year = %g, but %s gives %g bars a year (252 days; \"auto\"): "
        "vol_ann and the sizing scale are off by a factor %.3g",
        ppy, BarsText(c.bars), auto_ppy,
        std::sqrt(std::max(ppy, auto_ppy) / std::min(ppy, auto_ppy))));
  }
  if (interval == 0 && f.present && f.ticks_accepted > 0 && f.symbols > 0 &&
      f.last_tick_ns > f.first_tick_ns) {
    const double per_symbol =
        static_cast<double>(f.ticks_accepted) / static_cast<double>(f.symbols);
    const double spacing_s =
        static_cast<double>(f.last_tick_ns - f.first_tick_ns) * 1e-9 / std::max(1.0, per_symbol);
    if (spacing_s < 3600 && ppy < 252.0 * 24) {
      out.push_back(absl::StrFormat(
          "[bars] interval \"0s\" makes every tick a bar, and a symbol's ticks come about every "
          "%.3g s, but periods_per_year = %g annualizes each bar as %s: set [bars] interval "
          "(e.g. \"1m\") or periods_per_year",
          spacing_s, ppy, ppy <= 252 ? "a day" : "a fraction of a day"));
    }
  }

  if (interval > 0 && !c.bars.session.enabled && c.outputs.periods_per_year_auto && f.present &&
      f.max_symbol_bars > 0 && f.last_tick_ns - f.first_tick_ns > 2 * kNanosPerDay) {
    const double possible =
        static_cast<double>(f.last_tick_ns - f.first_tick_ns) / static_cast<double>(interval);
    const double used = static_cast<double>(f.max_symbol_bars) / possible;
    if (used < 0.5) {
      out.push_back(absl::StrFormat(
          "the input spans %.1f days but fills only %.0f%% of its %s bars (nights, weekends?), and "
          "without a [bars] session periods_per_year \"auto\" = %g counts 24-hour days: set "
          "[bars] session",
          static_cast<double>(f.last_tick_ns - f.first_tick_ns) / static_cast<double>(kNanosPerDay),
          100.0 * used, FormatDuration(interval), auto_ppy));
    }
  }

  // ---- Refits.
  if (!refits_on) {
    out.push_back(
        c.model.has_params
            ? "refits are off ([refit] every_bars = 0 and every_seconds = 0): every symbol keeps "
              "the fixed [model.params] model"
            : "refits are off ([refit] every_bars = 0 and every_seconds = 0) and [model.params] "
              "is not set: every symbol stays on the EWMA warm-up (version 0) for good");
  }

  // ---- min_bars against a session and the input.
  if (interval > 0 && c.bars.session.enabled) {
    const int64_t k = BarsPerSession(c.bars.session, interval);
    if (refits_on && c.refit.min_bars > k) {
      out.push_back(absl::StrFormat(
          "[refit] min_bars = %d is longer than one session (%d bars of %s): no model before "
          "session %d",
          c.refit.min_bars, k, FormatDuration(interval), c.refit.min_bars / k + 1));
    }
    if (c.warmup.min_bars > k) {
      out.push_back(absl::StrFormat("[warmup] min_bars = %d is longer than one session (%d bars)",
                                    c.warmup.min_bars, k));
    }
  }
  if (f.present && f.symbols > 0) {
    if (refits_on && f.max_symbol_bars < static_cast<uint64_t>(c.refit.min_bars)) {
      out.push_back(absl::StrFormat(
          "[refit] min_bars = %d, but no symbol had more than %d bars in this input: none could "
          "be fitted",
          c.refit.min_bars, f.max_symbol_bars));
    }
    if (f.max_symbol_bars < static_cast<uint64_t>(c.warmup.min_bars)) {
      out.push_back(absl::StrFormat(
          "[warmup] min_bars = %d, but no symbol had more than %d bars in this input",
          c.warmup.min_bars, f.max_symbol_bars));
    }
  }

  // ---- Feed encoding.
  if (c.feed.encoding == WireEncoding::kBinary) {
    out.push_back(
        f.from_file
            ? "[feed] encoding = \"binary\": replay reads the tick file and ignores it, but a live "
              "run needs a producer of binary frames (`aftershock simulate --publish` sends JSON "
              "unless given --encoding binary; JSON messages are rejected as malformed_binary)"
            : "[feed] encoding = \"binary\": the producer must send binary frames (`aftershock "
              "simulate --publish` sends JSON unless given --encoding binary; JSON messages are "
              "rejected as malformed_binary)");
  }

  // ---- Facts of the run.
  if (f.present) {
    const uint64_t rejected = f.rejects.Total();
    const uint64_t inputs = rejected + f.ticks_accepted;
    if (inputs > 0 && 2 * rejected > inputs) {
      std::vector<std::pair<uint64_t, int>> by;
      for (int i = 0; i < kNumRejectReasons; ++i) {
        if (f.rejects.by_reason[i] > 0) by.push_back({f.rejects.by_reason[i], i});
      }
      std::sort(by.rbegin(), by.rend());
      std::string reasons;
      for (size_t i = 0; i < by.size() && i < 3; ++i) {
        absl::StrAppend(&reasons, i ? ", " : "",
                        RejectReasonName(static_cast<RejectReason>(by[i].second)), " ",
                        by[i].first);
      }
      out.push_back(
          absl::StrFormat("most inputs were rejected: %d of %d (%.0f%%; %s): %s", rejected, inputs,
                          100.0 * static_cast<double>(rejected) / static_cast<double>(inputs),
                          reasons, RejectHint(static_cast<RejectReason>(by.front().second), c)));
    }
    if (f.symbols > 0 && f.symbols_fitted == 0) {
      out.push_back(absl::StrFormat(
          "no symbol got a fitted model (all %d ended on version 0 or the EWMA fallback)%s",
          f.symbols,
          refits_on ? "; check [refit] min_bars against the bars per symbol and the refit "
                      "rejections in --models"
                    : "; turn refits on ([refit] every_bars)"));
    }
  }
  return out;
}

}  // namespace aftershock
