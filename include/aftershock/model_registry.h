// Versioned, immutable model sets of the hot swap and the refit record each
// completed refit yields (PRODUCT.md C5/C6): the payload of an `m.<symbol>`
// message, with its JSON encoder.
//
// Thread-safety: a ModelVersion is immutable once published and is shared by
// std::shared_ptr<const ModelVersion> between a worker (which builds it) and the
// ingest thread (which swaps it in); RefitRecord is a plain value.
#ifndef AFTERSHOCK_MODEL_REGISTRY_H_
#define AFTERSHOCK_MODEL_REGISTRY_H_

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "aftershock/online_filter.h"
#include "aftershock/seasonal_profile.h"

namespace aftershock {

// One numbered parameter set of a symbol. Version 0 is the EWMA model used in
// warm-up and as the fallback; estimated versions count 1, 2, ... per symbol.
struct ModelVersion {
  uint32_t version = 0;
  FilterModel model;               // compiled with `version`
  std::vector<double> std_errors;  // Hessian-based, params order (empty for EWMA)
  double loglik = 0;               // of the fit on its window
  int64_t fitted_bar = 0;          // returns seen when the fit was scheduled
  // The intraday profile the model was fitted with (its returns were r / s(k));
  // null: raw returns. Swapped in together with the model.
  std::shared_ptr<const SeasonalProfile> profile;
};

using ModelVersionPtr = std::shared_ptr<const ModelVersion>;

// What happened to one refit job when it reached the stream.
enum class RefitOutcome {
  kSwapped,   // passed the gate: the new version is in force
  kRejected,  // failed the gate (or the refitter failed): the model in force stays
  kFallback,  // failed, and this failure engaged the EWMA fallback
  kPooled,    // no job: the symbol's group model was adopted (refit.h, group models)
};
// "swapped" | "rejected" | "fallback" | "pooled"
const char* RefitOutcomeName(RefitOutcome o);

struct RefitRecord {
  std::string symbol;
  RefitOutcome outcome = RefitOutcome::kRejected;
  uint32_t version = 0;            // version in force after this record
  int64_t scheduled_bar = 0;       // returns seen when scheduled
  int64_t applied_bar = 0;         // returns seen when applied
  int64_t t_ns = 0;                // bar end of the applied bar
  std::string spec;                // candidate's spec label (empty if the refitter failed)
  std::vector<std::string> names;  // parameter names, params order
  std::vector<double> values;
  std::vector<double> std_errors;
  std::vector<double> robust_std_errors;
  double loglik = 0;
  double bic = 0;
  int nobs = 0;
  bool converged = false;
  std::vector<std::string> reasons;  // gate reasons (empty when swapped)
  std::string note;                  // the refitter's note
  double fit_seconds = 0;            // wall time of the refitter call
  // In-process timings of the job (not in the JSON record, so replay output
  // stays byte-identical): wall seconds from its submission by the ingest
  // thread until a worker took it, and from then until its result was ready
  // (the refitter call plus gate, holdout scores and the variance re-run).
  double queue_seconds = 0;
  double job_seconds = 0;
  int consecutive_failures = 0;      // after this record
  bool fallback = false;             // fallback in force after this record
};

// The record as one JSON object: keys in byte order, numbers in their shortest
// round-trip form (std::to_chars), non-finite numbers as null (never
// NaN/Infinity). A string that is not valid UTF-8 makes the whole record
// {"error":"record could not be encoded"}.
std::string EncodeRefitRecordJson(const RefitRecord& record);
// The same into *out (replaced), which keeps its capacity: the engine applies
// refits on the ingest thread and reuses one buffer, so a record costs no
// allocation once the buffer has grown.
void EncodeRefitRecordJson(const RefitRecord& record, std::string* out);

// A record's JSON written in two steps, so that the thread applying a refit
// formats no estimate: Prepare (on the worker that made the record) formats
// its doubles (bic, log_likelihood, each estimate's value and standard
// errors) in shortest round-trip form, about 300 bytes for a GARCH(1,1);
// Finish writes the record it is given with those numbers, the rest
// (strings, integers, fit_seconds) from that record. Finish(r) after
// Prepare(p) equals EncodeRefitRecordJson of r with p's bic, loglik, values,
// std_errors and robust_std_errors, byte for byte (model_registry_test),
// when r and p have as many names; otherwise, and before any Prepare, it is
// EncodeRefitRecordJson(r).
//
// Only the numbers are kept, not the whole text (about 1 KiB): every symbol
// whose finished job waits for its bar holds one, and the whole text cost
// 1.1 KiB per symbol at 10,000 instruments (scale_bench), past P5's 40 KiB.
//
// Thread-safety: a plain value (not synchronized). Moving or swapping one
// keeps its buffer, so a reused object does not allocate once it has grown.
class RefitRecordJson {
 public:
  void Prepare(const RefitRecord& record);
  // Replaces *out (keeps its capacity).
  void Finish(const RefitRecord& record, std::string* out) const;
  bool prepared() const { return count_ > 0; }

 private:
  std::string numbers_;  // the formatted doubles in write order, each ended by ';'
  size_t count_ = 0;     // how many (0: never prepared)
};

}  // namespace aftershock

#endif  // AFTERSHOCK_MODEL_REGISTRY_H_
