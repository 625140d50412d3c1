#include "app/args.h"

#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstdlib>

#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_split.h"
#include "absl/strings/strip.h"
#include "aftershock/renames.h"

namespace aftershock::app {

int ReportFailure(absl::string_view command, const absl::Status& status, int code) {
  std::fprintf(stderr, "aftershock %s: %s\n", std::string(command).c_str(),
               std::string(status.message()).c_str());
  return code;
}

ArgParser::ArgParser(std::string command, std::string summary)
    : command_(std::move(command)), summary_(std::move(summary)) {}

void ArgParser::AddOption(const std::string& name, const std::string& value_name,
                          const std::string& help, const std::string& def, bool required) {
  order_.push_back(name);
  specs_[name] = Spec{value_name.empty() ? "VALUE" : value_name, help, def, required};
}

void ArgParser::AddFlag(const std::string& name, const std::string& help) {
  order_.push_back(name);
  specs_[name] = Spec{"", help, "", false};
}

absl::Status ArgParser::Parse(int argc, char** argv, int first) {
  for (int i = first; i < argc; ++i) {
    std::string arg = argv[i];
    if (arg == "--help" || arg == "-h") {
      help_ = true;
      return absl::OkStatus();
    }
    if (arg.rfind("--", 0) != 0) {
      return absl::InvalidArgumentError(
          absl::StrCat("unexpected argument '", arg, "' (options start with --; see ", command_,
                       " --help)"));
    }
    std::string name = arg.substr(2);
    std::string value;
    bool has_value = false;
    if (auto eq = name.find('='); eq != std::string::npos) {
      value = name.substr(eq + 1);
      name = name.substr(0, eq);
      has_value = true;
    }
    auto it = specs_.find(name);
    if (it == specs_.end()) {
      const std::string hint = RenameHint(RenameKind::kOption, "", absl::StrCat("--", name));
      if (!hint.empty()) return absl::InvalidArgumentError(absl::StrCat("option ", hint));
      return absl::InvalidArgumentError(
          absl::StrCat("unknown option --", name, " (see ", command_, " --help)"));
    }
    if (it->second.value_name.empty()) {
      if (has_value) {
        return absl::InvalidArgumentError(absl::StrCat("option --", name, " takes no value"));
      }
      values_[name] = "1";
      continue;
    }
    if (!has_value) {
      if (i + 1 >= argc) {
        return absl::InvalidArgumentError(
            absl::StrCat("option --", name, " needs a value (", it->second.value_name, ")"));
      }
      value = argv[++i];
    }
    values_[name] = value;
    all_values_[name].push_back(value);
  }
  for (const auto& name : order_) {
    const Spec& s = specs_.at(name);
    if (s.required && !values_.count(name)) {
      return absl::InvalidArgumentError(
          absl::StrCat("missing required option --", name, " ", s.value_name, " (see ", command_,
                       " --help)"));
    }
  }
  return absl::OkStatus();
}

std::string ArgParser::Help() const {
  std::string out = absl::StrCat("usage: ", command_, " [options]\n\n", summary_, "\n\noptions:\n");
  for (const auto& name : order_) {
    const Spec& s = specs_.at(name);
    std::string left = absl::StrCat("  --", name);
    if (!s.value_name.empty()) absl::StrAppend(&left, " ", s.value_name);
    if (left.size() < 28) {
      left.resize(28, ' ');
    } else {
      absl::StrAppend(&left, "\n", std::string(28, ' '));
    }
    std::string help = s.help;
    if (s.required) absl::StrAppend(&help, " (required)");
    if (!s.def.empty()) absl::StrAppend(&help, " [default: ", s.def, "]");
    absl::StrAppend(&out, left, help, "\n");
  }
  absl::StrAppend(&out, "  --help                    show this page and exit\n");
  return out;
}

bool ArgParser::Has(const std::string& name) const { return values_.count(name) > 0; }

std::string ArgParser::Get(const std::string& name) const {
  if (auto it = values_.find(name); it != values_.end()) return it->second;
  if (auto it = specs_.find(name); it != specs_.end()) return it->second.def;
  return "";
}

bool ArgParser::Flag(const std::string& name) const { return values_.count(name) > 0; }

std::vector<std::string> ArgParser::GetAll(const std::string& name) const {
  if (auto it = all_values_.find(name); it != all_values_.end()) return it->second;
  return {};
}

absl::StatusOr<double> ArgParser::GetDouble(const std::string& name) const {
  const std::string v = Get(name);
  double d = 0;
  if (!absl::SimpleAtod(v, &d) || !std::isfinite(d)) {
    return absl::InvalidArgumentError(
        absl::StrCat("option --", name, " needs a finite number, got '", v, "'"));
  }
  return d;
}

absl::StatusOr<long long> ArgParser::GetInt(const std::string& name) const {
  const std::string v = Get(name);
  int64_t i = 0;
  if (!absl::SimpleAtoi(v, &i)) {
    return absl::InvalidArgumentError(
        absl::StrCat("option --", name, " needs an integer, got '", v, "'"));
  }
  return static_cast<long long>(i);
}

absl::StatusOr<std::vector<int>> ArgParser::GetIntList(const std::string& name) const {
  std::vector<int> out;
  const std::string v = Get(name);
  if (v.empty()) return out;
  for (absl::string_view part : absl::StrSplit(v, ',')) {
    int x = 0;
    if (!absl::SimpleAtoi(absl::StripAsciiWhitespace(part), &x)) {
      return absl::InvalidArgumentError(absl::StrCat(
          "option --", name, " needs comma-separated integers such as 1,1; got '", v, "'"));
    }
    out.push_back(x);
  }
  return out;
}

}  // namespace aftershock::app
