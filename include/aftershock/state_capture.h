// StateCapture: a component's checkpoint state copied out of the live object
// so that it can be encoded on another thread (PRODUCT.md C10, §6).
//
// Each stateful engine component (IngestCore, EngineServices, and inside the
// services the RefitCoordinator) makes its own capture type
// (NewStateCapture) and fills it (CaptureState) on the ingest thread, between
// batches. A capture is kept and refilled from one checkpoint to the next, so
// a refill costs the ingest thread only what changed: flat per-symbol values
// are copied into storage allocated with the symbol, immutable shared objects
// (models, profiles, model versions) are held by pointer and re-pointed only
// when the live pointer changed, and rolling windows are brought up to date
// with the returns pushed since the previous capture
// (RollingWindow::SyncFrom). Encode then writes exactly the bytes the
// component's SaveState would have written at the capture (SaveState is
// itself "capture into a fresh capture, then Encode"), so the file format
// does not depend on how the state was captured.
//
// A capture may also be filled in slices (IngestCore::CaptureSymbols and its
// peers; EngineCapture::BeginSlices): a range of symbols per gap between
// batches, each symbol's state of every component in the same gap, the
// feed-wide state with the last slice. Encode then writes each symbol as of
// its own gap (Restorable says whether such parts can be restored together).
//
// Thread-safety: CaptureState (the owner's) on the owner's thread; Encode on
// any one thread, never concurrently with a CaptureState into the same
// capture (the caller hands the capture over, e.g. under a mutex:
// checkpointer.h). Encode reads only the capture and the immutable objects it
// holds.
#ifndef AFTERSHOCK_STATE_CAPTURE_H_
#define AFTERSHOCK_STATE_CAPTURE_H_

#include <cstdint>

#include "aftershock/state_codec.h"

namespace aftershock {

class StateCapture {
 public:
  virtual ~StateCapture() = default;
  // Appends the captured state in its component's SaveState encoding.
  virtual void Encode(StateWriter* w) const = 0;
  // A capture spread over gaps (IngestCore::CaptureSymbols) holds each
  // symbol's state at its own gap. False when those states cannot be
  // restored together (the refit coordinator's pending jobs, captured at
  // different gaps, outnumber its job slots): the caller then captures
  // everything again in one gap. Always true for a capture taken in one gap.
  virtual bool Restorable() const { return true; }

  // Bytes copied out of the live state into this capture (and the captures
  // it holds) since it was made, a running total: what the fills cost the
  // ingest thread in memory traffic (records, window returns, pending refit
  // inputs), counted by the fills so that a benchmark can compare capture
  // designs without a clock (EngineCapture::copied_bytes: per snapshot).
  // Owner's thread, or the holder of the capture (the hand-off of Encode).
  virtual uint64_t copied_bytes() const { return copied_bytes_; }
  void AddCopied(uint64_t n) { copied_bytes_ += n; }

 private:
  uint64_t copied_bytes_ = 0;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_STATE_CAPTURE_H_
