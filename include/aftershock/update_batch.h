// Update batches: many updates in one outbound message, for consumers that
// want throughput more than per-symbol topic filtering ([publish]
// update_topics = "batch" or "both"; issue 13). The per-symbol messages
// "u.<symbol>" stay as they are; a batch travels on the topic "b.u"
// (kUpdateBatchTopic), which no per-symbol subscription ("u.", "a.", "m.")
// matches.
//
// A batch carries the updates of one round of input: the engine's loop
// (engine.h) calls UpdateSink::EndRound after each drain of the feed (up to
// EngineOptions::max_messages_per_round inbound messages) and after each
// clock tick, so a batch holds the updates of the bars closed by that round,
// in the order the per-symbol messages are sent. Why per round and not per
// bar end: a time bar of one symbol closes at that symbol's first tick of
// the next interval, so waiting for every symbol's bar of one interval would
// hold early updates until the grace passes; a round adds no wait (an idle
// feed gives rounds of one message, a saturated one rounds of thousands, so
// batches grow exactly when throughput matters). A batch is also sent before
// it would exceed [publish] batch_max_bytes or batch_max_updates, and at
// Flush. Alerts and model records (a., m.) pass through at once, so they
// precede the batch holding the update of their bar.
//
// Binary ([publish] encoding = "binary"), little-endian:
//   offset  size  field
//   0       1     magic 0xA9 (kUpdateBatchMagic)
//   1       1     version 1 (kUpdateBatchVersion)
//   2       2     count (uint16), 1..65535 records follow
//   4       ...   count x { uint16 size, `size` bytes: one update in the
//                 update binary layout (update_codec.h, magic 0xA8) }
//   The message ends right after the last record.
// JSON ([publish] encoding = "json"):
//   {"n":<count>,"u":[<update>,<update>,...]}
//   each <update> the update JSON object exactly as sent on "u.<symbol>".
// Every record is byte for byte the body of the per-symbol message, so a
// consumer decodes it with DecodeUpdateBinary / DecodeUpdateJson.
//
// Counting: the core counts an update in updates_out when the batch accepts
// it; a batch the publisher refuses (a subscriber's queue at its high-water
// mark) is counted here, with the updates it held (metrics()).
//
// Thread-safety: a BatchingSink is used by one thread (the ingest thread);
// stats() from that thread.
#ifndef AFTERSHOCK_UPDATE_BATCH_H_
#define AFTERSHOCK_UPDATE_BATCH_H_

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/strings/string_view.h"
#include "aftershock/engine_config.h"
#include "aftershock/ingest_core.h"
#include "aftershock/update_sink.h"
#include "aftershock/wire.h"

namespace aftershock {

inline constexpr absl::string_view kUpdateBatchTopic = "b.u";
inline constexpr uint8_t kUpdateBatchMagic = 0xA9;
inline constexpr uint8_t kUpdateBatchVersion = 1;

// Gathers the update messages ("u.<symbol>") handed to it into batches on
// kUpdateBatchTopic and passes everything else to the inner sink at once.
class BatchingSink : public UpdateSink, public MetricsSource {
 public:
  struct Stats {
    uint64_t batches = 0;          // batch messages the inner sink accepted
    uint64_t batch_drops = 0;      // batch messages it refused
    uint64_t dropped_updates = 0;  // updates inside the refused batches
    uint64_t batched_updates = 0;  // updates inside the accepted batches
  };

  // Batches per publish.encoding, update_topics ("both": every update is also
  // passed on as its own message), batch_max_bytes and batch_max_updates.
  // REQUIRES: inner non-null; publish.update_topics != kSymbol.
  BatchingSink(const PublishConfig& publish, std::unique_ptr<UpdateSink> inner);

  // "u.<symbol>": appended to the batch (sent first if the update would not
  // fit); true, or with "both" the inner sink's answer for the per-symbol
  // message. Other topics: the inner sink's Send.
  bool Send(absl::string_view topic, absl::string_view body) override;
  // Sends the batch in hand (if any), then passes the call on.
  void EndRound() override;
  // EndRound, then the inner sink's Flush.
  absl::Status Flush() override;
  std::string BoundEndpoint() const override { return inner_->BoundEndpoint(); }
  const MetricsSource* metrics() const override { return this; }

  // MetricsSource: aftershock_update_batches_total,
  // aftershock_update_batch_drops_total, aftershock_update_batch_dropped_updates_total.
  void AppendPrometheus(std::string* out) const override;

  const Stats& stats() const { return stats_; }
  // Updates in the batch in hand (not yet sent).
  int pending() const { return count_; }

 private:
  void SendBatch();

  std::unique_ptr<UpdateSink> inner_;
  const bool binary_;
  const bool both_;
  const size_t max_bytes_;
  const int max_updates_;
  // The batch body is built from offset kHeaderRoom on; SendBatch writes the
  // header right-aligned in front of the records, so nothing is copied.
  std::string buffer_;
  int count_ = 0;
  Stats stats_;
};

// Wraps `sink` in a BatchingSink when publish.update_topics is "batch" or
// "both"; returns it unchanged for "symbol".
std::unique_ptr<UpdateSink> MaybeBatchUpdates(const PublishConfig& publish,
                                              std::unique_ptr<UpdateSink> sink);

// Splits a batch body into its records (views into `body`, each the body of
// one per-symbol update message). InvalidArgument when the body is not a
// well-formed batch of that encoding (magic, version, count, sizes; JSON:
// the {"n":..,"u":[..]} frame, balanced objects, n equal to the records).
// For consumers and tests; the JSON path scans characters, not for a hot path.
absl::Status SplitUpdateBatch(absl::string_view body, WireEncoding encoding,
                              std::vector<absl::string_view>* records);

}  // namespace aftershock

#endif  // AFTERSHOCK_UPDATE_BATCH_H_
