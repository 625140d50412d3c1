// ArgParser: the option parser shared by every subcommand. Options are declared
// with a help line, parsed from `--name value` or `--name=value`, and `--help`
// prints a generated usage page. Bad or unknown options are errors (values).
//
// Thread-safety: not thread-safe; used on the main thread at start-up.
#ifndef AFTERSHOCK_APP_ARGS_H_
#define AFTERSHOCK_APP_ARGS_H_

#include <map>
#include <string>
#include <vector>

#include "absl/status/status.h"
#include "absl/status/statusor.h"
#include "absl/strings/string_view.h"

namespace aftershock::app {

// Prints "aftershock <command>: <message>" on standard error and returns code
// (the exit code of the subcommand).
int ReportFailure(absl::string_view command, const absl::Status& status, int code);

class ArgParser {
 public:
  // `command` e.g. "aftershock fit"; `summary` one paragraph shown under usage.
  ArgParser(std::string command, std::string summary);

  // Declares a valued option. `value_name` shows in help ("FILE"); `def` is the
  // default ("" = none); `required` options must be given.
  void AddOption(const std::string& name, const std::string& value_name, const std::string& help,
                 const std::string& def = "", bool required = false);
  // Declares a boolean flag (no value).
  void AddFlag(const std::string& name, const std::string& help);

  // Parses argv[first..argc). Returns OK, or InvalidArgument naming the option.
  // After OK, HelpRequested() tells whether --help/-h was seen (nothing else is
  // validated then).
  absl::Status Parse(int argc, char** argv, int first = 0);

  bool HelpRequested() const { return help_; }
  std::string Help() const;

  bool Has(const std::string& name) const;  // given on the command line (or a flag set)
  std::string Get(const std::string& name) const;  // value or default
  bool Flag(const std::string& name) const;
  // Every value given for a repeatable option, in command-line order (Get
  // returns the last one); empty when the option was not given.
  std::vector<std::string> GetAll(const std::string& name) const;

  absl::StatusOr<double> GetDouble(const std::string& name) const;
  absl::StatusOr<long long> GetInt(const std::string& name) const;
  // A comma-separated list of integers ("1,1"); empty string -> empty vector.
  absl::StatusOr<std::vector<int>> GetIntList(const std::string& name) const;

 private:
  struct Spec {
    std::string value_name;  // empty for flags
    std::string help;
    std::string def;
    bool required = false;
  };
  std::string command_;
  std::string summary_;
  std::vector<std::string> order_;
  std::map<std::string, Spec> specs_;
  std::map<std::string, std::string> values_;
  std::map<std::string, std::vector<std::string>> all_values_;
  bool help_ = false;
};

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_ARGS_H_
