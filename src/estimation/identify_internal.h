// Test hook of the identification: IdentifyModel with its candidate pruning
// switched off, so tests can check that pruning never changes the choice.
// Not part of the public API (no configuration key or option reaches it).
//
// Thread-safety: reentrant, as IdentifyModel.
#ifndef AFTERSHOCK_ESTIMATION_IDENTIFY_INTERNAL_H_
#define AFTERSHOCK_ESTIMATION_IDENTIFY_INTERNAL_H_

#include "absl/status/statusor.h"
#include "absl/types/span.h"
#include "aftershock/identify.h"

namespace aftershock::internal {

struct IdentifySearch {
  // Skip an ARCH(m) candidate whose criterion bound, from the fitted models
  // that nest it, exceeds the best eligible criterion by more than the margin
  // (identify.cc). Default true (IdentifyModel); false fits every candidate.
  bool prune_nested_arch = true;
};

// IdentifyModel(returns, options) with the given search settings.
absl::StatusOr<IdentificationReport> IdentifyModelWithSearch(absl::Span<const double> returns,
                                                             const IdentifyOptions& options,
                                                             const IdentifySearch& search);

}  // namespace aftershock::internal

#endif  // AFTERSHOCK_ESTIMATION_IDENTIFY_INTERNAL_H_
