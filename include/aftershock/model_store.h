// Model store: the fitted models a universe can start on (PRODUCT.md C10,
// issue "model store"). A model file is the JSON Lines stream of refit records
// that `aftershock replay --models` writes (model_registry.h,
// EncodeRefitRecordJson); `--initial-models` reads it and `aftershock models`
// lists, shows and exports it (and the models in force in a checkpoint).
//
// Which record counts: per symbol, the last record in file order whose
// outcome is "swapped" (the version that went into force last). Records of
// other outcomes (rejected, fallback, pooled) are skipped; they carry no
// model of the symbol's own.
//
// The record names its specification ("spec", ModelSpec::Label) and its
// parameters ("estimates": [{"name", "value", ...}]); the specification is parsed
// from the label (ParseSpecLabel) and its parameter names must be the
// record's, in order, so a record cannot silently start a symbol on another
// model than the one it names. Records of the retired format ("params",
// labels like "constant-mean-GARCH(1,1)-t") are refused with a message naming
// the rename (CHANGELOG.md); re-export or refit to get records of this format.
//
// Thread-safety: free functions on values; safe from any thread.
#ifndef AFTERSHOCK_MODEL_STORE_H_
#define AFTERSHOCK_MODEL_STORE_H_

#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"
#include "aftershock/model_params.h"
#include "aftershock/model_registry.h"
#include "aftershock/online_filter.h"

namespace aftershock {

// One symbol's stored model. Plain value.
struct StoredModel {
  std::string symbol;
  uint32_t version = 0;            // >= 1 for a fitted model (0: the EWMA warm-up)
  ModelParams params;              // passes CheckConstraints
  std::vector<double> std_errors;  // params order; empty when unknown
  double loglik = std::numeric_limits<double>::quiet_NaN();  // of its fit; NaN: unknown
  int64_t scheduled_bar = -1;      // returns seen when its fit was scheduled; -1: unknown
  int64_t applied_bar = -1;        // returns seen when it went into force; -1: unknown
  int64_t t_ns = 0;                // end of the bar it went into force at; 0: unknown
  // "fitted" (its own estimated model or fixed [model.params]), "warmup",
  // "fallback" or "pooled" (a group model); a model file holds only "fitted".
  std::string status = "fitted";
  int line = 0;                    // 1-based line of the record in its file; 0: not from a file
};

// The specification a ModelSpec::Label() names, e.g.
// "ARMA(1,1)/GJR-GARCH(1,1)/student", "ARMA(1,0)/GJR-GARCH(2,1;1)/gaussian" or
// "zero/GARCH(1,1)/gaussian". InvalidArgument for anything else (including
// orders ModelSpec::Validate refuses).
absl::StatusOr<ModelSpec> ParseSpecLabel(absl::string_view label);

// The stored models of a model file's text (see above), sorted by symbol.
// `name` prefixes every error ("<name>:<line>: <problem>"); InvalidArgument
// for a line that is not a JSON object, a swapped record missing a field or
// with a field of the wrong type, an invalid symbol, a version below 1, a
// specification label that does not match the parameter names, or parameters
// failing the model's constraints (the message names the symbol). Blank lines
// are skipped.
absl::StatusOr<std::vector<StoredModel>> ParseModelRecords(absl::string_view text,
                                                           absl::string_view name);
// Reads `path` and parses it; NotFound when it cannot be opened.
absl::StatusOr<std::vector<StoredModel>> ReadModelRecordsFile(const std::string& path);

// The record that ParseModelRecords reads back as `model` (outcome swapped;
// unknown bars as 0). For exports.
RefitRecord ToRefitRecord(const StoredModel& model);

// OK when every model compiles for the engine's outputs (FilterModel::Create
// with its version); else InvalidArgument "<name>:<line>: symbol S: problem".
absl::Status CheckStoredModels(const std::vector<StoredModel>& models,
                               const OutputOptions& outputs, absl::string_view name);

// ReadModelRecordsFile then CheckStoredModels: the models `--initial-models
// path` starts from, or the first error (file:line: symbol: problem).
absl::StatusOr<std::vector<StoredModel>> LoadInitialModels(const std::string& path,
                                                           const OutputOptions& outputs);

// Half-life in bars of a variance shock: ln(1/2) / ln(persistence), lambda for
// EWMA; +inf for persistence >= 1, 0 for persistence <= 0.
double VarianceHalfLifeBars(const ModelParams& params);

}  // namespace aftershock

#endif  // AFTERSHOCK_MODEL_STORE_H_
