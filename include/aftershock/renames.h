// Renames: the user-visible names retired by the vocabulary change, old -> new,
// in one table for the command line, the configuration, option values, model
// parameters and JSON keys. Every parser that refuses an old name asks this
// table for the hint naming its replacement; CHANGELOG.md prints the same rows
// (tests/io/renames_test.cc checks both ways).
//
// Thread-safety: immutable data and pure functions; safe from any thread.
#ifndef AFTERSHOCK_RENAMES_H_
#define AFTERSHOCK_RENAMES_H_

#include <string>

#include "absl/strings/string_view.h"
#include "absl/types/span.h"

namespace aftershock {

enum class RenameKind {
  kOption,     // command-line option, e.g. "--variance-order"
  kConfigKey,  // configuration key, `where` is its section, e.g. "[model]"
  kValue,      // value of an option or key, `where` is the option, e.g. "variance"
  kParameter,  // model parameter name ("alpha1" style: letters then digits)
  kJsonKey,    // key of a JSON output, `where` is the output
  kLabel,      // model label
};

// One retired name. Strings are static.
struct RetiredName {
  RenameKind kind;
  absl::string_view where;     // section, option or output it belongs to ("" for options)
  absl::string_view old_name;  // as users wrote or read it
  absl::string_view new_name;  // what replaces it (may list several names)
};

// Every retired name, in the order CHANGELOG.md lists them.
absl::Span<const RetiredName> RetiredNames();

// The hint for a refused name, e.g. "'variance_order' was renamed: use
// shock_lags, asym_lags and variance_lags (CHANGELOG.md)"; "" when `old_name`
// is not a retired name of `kind` at `where` (`where` is ignored for options and
// parameters). Parameters match by pattern: "alpha2" -> "alpha_2".
std::string RenameHint(RenameKind kind, absl::string_view where, absl::string_view old_name);

}  // namespace aftershock

#endif  // AFTERSHOCK_RENAMES_H_
