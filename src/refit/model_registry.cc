#include "aftershock/model_registry.h"

#include <charconv>
#include <cmath>
#include <limits>
#include <nlohmann/json.hpp>

#include "absl/strings/string_view.h"

namespace aftershock {

const char* RefitOutcomeName(RefitOutcome o) {
  switch (o) {
    case RefitOutcome::kSwapped:
      return "swapped";
    case RefitOutcome::kRejected:
      return "rejected";
    case RefitOutcome::kFallback:
      return "fallback";
    case RefitOutcome::kPooled:
      return "pooled";
  }
  return "rejected";
}

namespace {

// Writers for EncodeRefitRecordJson, appending to *out.

void PutRaw(std::string* out, absl::string_view s) { out->append(s.data(), s.size()); }

void PutDouble(std::string* out, double x) {
  if (!std::isfinite(x)) {
    PutRaw(out, "null");
    return;
  }
  char buf[32];
  const auto res = std::to_chars(buf, buf + sizeof(buf), x);
  out->append(buf, res.ptr);
}

template <typename Int>
void PutInt(std::string* out, Int v) {
  char buf[24];
  const auto res = std::to_chars(buf, buf + sizeof(buf), v);
  out->append(buf, res.ptr);
}

void PutBool(std::string* out, bool b) { PutRaw(out, b ? "true" : "false"); }

// A JSON string. Printable ASCII needs only '"' and '\\' escaped; anything
// else (control bytes, UTF-8) goes through the JSON library, whose escapes
// and UTF-8 check the records have always had. False: not valid UTF-8.
bool PutString(std::string* out, absl::string_view s) {
  bool plain = true;
  for (char c : s) {
    const auto u = static_cast<unsigned char>(c);
    if (u < 0x20 || u >= 0x80) {
      plain = false;
      break;
    }
  }
  if (!plain) {
    try {
      PutRaw(out, nlohmann::json(std::string(s)).dump());
      return true;
    } catch (const std::exception&) {
      return false;  // invalid UTF-8
    }
  }
  out->push_back('"');
  for (char c : s) {
    if (c == '"' || c == '\\') out->push_back('\\');
    out->push_back(c);
  }
  out->push_back('"');
  return true;
}

constexpr absl::string_view kEncodeError = "{\"error\":\"record could not be encoded\"}";
// An estimate's number missing from its vector (written null).
constexpr double kMissing = std::numeric_limits<double>::quiet_NaN();

// Writes the record, keys in byte order (as the JSON library writes an
// object; model_registry_test checks the two agree). number(x, out) writes
// the record's doubles other than fit_seconds, in the order met: bic, each
// estimate's se_hessian, se_robust and value (kMissing where the vector is
// short), then log_likelihood.
template <typename Number>
void WriteRecord(const RefitRecord& r, const Number& number, std::string* out) {
  auto nth = [](const std::vector<double>& v, size_t i) { return i < v.size() ? v[i] : kMissing; };
  out->clear();
  bool ok = true;
  PutRaw(out, "{\"applied_bar\":");
  PutInt(out, r.applied_bar);
  PutRaw(out, ",\"bic\":");
  number(r.bic, out);
  PutRaw(out, ",\"consecutive_failures\":");
  PutInt(out, r.consecutive_failures);
  PutRaw(out, ",\"converged\":");
  PutBool(out, r.converged);
  PutRaw(out, ",\"estimates\":[");
  for (size_t i = 0; i < r.names.size(); ++i) {
    if (i > 0) out->push_back(',');
    PutRaw(out, "{\"name\":");
    ok &= PutString(out, r.names[i]);
    PutRaw(out, ",\"se_hessian\":");
    number(nth(r.std_errors, i), out);
    PutRaw(out, ",\"se_robust\":");
    number(nth(r.robust_std_errors, i), out);
    PutRaw(out, ",\"value\":");
    number(nth(r.values, i), out);
    out->push_back('}');
  }
  PutRaw(out, "],\"fallback\":");
  PutBool(out, r.fallback);
  PutRaw(out, ",\"fit_seconds\":");
  PutDouble(out, r.fit_seconds);
  PutRaw(out, ",\"gate\":{\"passed\":");
  PutBool(out, r.outcome == RefitOutcome::kSwapped);
  PutRaw(out, ",\"reasons\":[");
  for (size_t i = 0; i < r.reasons.size(); ++i) {
    if (i > 0) out->push_back(',');
    ok &= PutString(out, r.reasons[i]);
  }
  PutRaw(out, "]},\"likelihood_terms\":");
  PutInt(out, r.nobs);
  PutRaw(out, ",\"log_likelihood\":");
  number(r.loglik, out);
  PutRaw(out, ",\"note\":");
  ok &= PutString(out, r.note);
  PutRaw(out, ",\"outcome\":");
  ok &= PutString(out, RefitOutcomeName(r.outcome));
  PutRaw(out, ",\"scheduled_bar\":");
  PutInt(out, r.scheduled_bar);
  PutRaw(out, ",\"spec\":");
  ok &= PutString(out, r.spec);
  PutRaw(out, ",\"symbol\":");
  ok &= PutString(out, r.symbol);
  PutRaw(out, ",\"t_ns\":");
  PutInt(out, r.t_ns);
  PutRaw(out, ",\"version\":");
  PutInt(out, r.version);
  out->push_back('}');
  if (!ok) out->assign(kEncodeError.data(), kEncodeError.size());
}

// The doubles WriteRecord formats, for a record with `estimates` names.
size_t NumbersOf(size_t estimates) { return 3 * estimates + 2; }

}  // namespace

void EncodeRefitRecordJson(const RefitRecord& r, std::string* out) {
  // Written directly (the engine encodes every applied refit): the JSON
  // library's document tree cost about 6 µs a record in allocations
  // (refit_bench BM_EngineApply).
  WriteRecord(
      r, [](double x, std::string* o) { PutDouble(o, x); }, out);
}

void RefitRecordJson::Prepare(const RefitRecord& record) {
  // The numbers go to a buffer of the thread first and are then assigned, so
  // that what a waiting job holds is their length (the buffer, and the record
  // written alongside to walk it in order, stay with the thread for reuse).
  thread_local std::string numbers, scratch;
  numbers.clear();
  WriteRecord(
      record,
      [](double x, std::string*) {
        PutDouble(&numbers, x);
        numbers.push_back(';');  // never part of a number or null
      },
      &scratch);
  numbers_.assign(numbers);
  count_ = NumbersOf(record.names.size());
}

void RefitRecordJson::Finish(const RefitRecord& record, std::string* out) const {
  if (count_ == 0 || NumbersOf(record.names.size()) != count_) {
    EncodeRefitRecordJson(record, out);
    return;
  }
  size_t at = 0;
  WriteRecord(
      record,
      [this, &at](double, std::string* o) {
        const size_t end = numbers_.find(';', at);
        o->append(numbers_, at, end - at);
        at = end + 1;
      },
      out);
}

std::string EncodeRefitRecordJson(const RefitRecord& r) {
  std::string out;
  EncodeRefitRecordJson(r, &out);
  return out;
}

}  // namespace aftershock
