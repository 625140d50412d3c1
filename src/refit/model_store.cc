#include "aftershock/model_store.h"

#include <algorithm>
#include <cmath>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>

#include "absl/strings/match.h"
#include "absl/strings/numbers.h"
#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "absl/strings/str_split.h"
#include "absl/strings/strip.h"
#include "aftershock/renames.h"
#include "aftershock/wire.h"

namespace aftershock {
namespace {

// Parses "(a,b,...)" at the front of *s into exactly `n` integers.
bool ConsumeOrders(absl::string_view* s, int n, int* out) {
  if (!absl::ConsumePrefix(s, "(")) return false;
  const size_t close = s->find(')');
  if (close == absl::string_view::npos) return false;
  std::vector<absl::string_view> parts = absl::StrSplit(s->substr(0, close), ',');
  if (static_cast<int>(parts.size()) != n) return false;
  for (int i = 0; i < n; ++i) {
    if (!absl::SimpleAtoi(parts[i], &out[i])) return false;
  }
  s->remove_prefix(close + 1);
  return true;
}

absl::Status LineError(absl::string_view name, int line, absl::string_view problem) {
  return absl::InvalidArgumentError(absl::StrCat(name, ":", line, ": ", problem));
}

}  // namespace

absl::StatusOr<ModelSpec> ParseSpecLabel(absl::string_view label) {
  const auto bad = [&] {
    // Labels of the retired form ("constant-mean-GARCH(1,1)-t") name the change.
    const bool retired = absl::EndsWith(label, "-t") || absl::EndsWith(label, "-normal");
    return absl::InvalidArgumentError(
        absl::StrCat("'", label, "' is not a model label (e.g. const/GARCH(1,1)/student",
                     retired ? "; labels were renamed, e.g. constant-mean-GARCH(1,1)-t is now "
                               "const/GARCH(1,1)/student (CHANGELOG.md)"
                             : "",
                     ")"));
  };
  ModelSpec spec;
  absl::string_view s = label;
  int o[3] = {0, 0, 0};
  if (absl::ConsumePrefix(&s, "zero")) {
    spec.mean = MeanKind::kZero;
  } else if (absl::ConsumePrefix(&s, "const")) {
    spec.mean = MeanKind::kConstant;
  } else if (absl::ConsumePrefix(&s, "ARMA") && ConsumeOrders(&s, 2, o)) {
    spec.mean = MeanKind::kArma;
    spec.ar_order = o[0];
    spec.ma_order = o[1];
  } else {
    return bad();
  }
  if (!absl::ConsumePrefix(&s, "/")) return bad();
  spec.arch_order = spec.asym_order = spec.garch_order = 0;
  if (absl::ConsumePrefix(&s, "flat")) {
    spec.variance = VarianceKind::kConstant;
  } else if (absl::ConsumePrefix(&s, "EWMA")) {
    spec.variance = VarianceKind::kEwma;
  } else if (absl::ConsumePrefix(&s, "ARCH") && ConsumeOrders(&s, 1, o)) {
    spec.variance = VarianceKind::kArch;
    spec.arch_order = o[0];
  } else if (absl::ConsumePrefix(&s, "GARCH") && ConsumeOrders(&s, 2, o)) {
    spec.variance = VarianceKind::kGarch;
    spec.arch_order = o[0];
    spec.garch_order = o[1];
  } else if (absl::ConsumePrefix(&s, "GJR-GARCH")) {
    // "(p,q)" (asym lags = p) or "(p,q;o)".
    spec.variance = VarianceKind::kGjr;
    const size_t semi = s.find(';');
    const size_t close = s.find(')');
    if (semi != absl::string_view::npos && semi < close) {
      const std::string pq = absl::StrCat(s.substr(0, semi), ")");
      absl::string_view pqv = pq;
      absl::string_view ov = s.substr(semi + 1, close - semi - 1);
      if (!ConsumeOrders(&pqv, 2, o) || !pqv.empty() || !absl::SimpleAtoi(ov, &o[2])) {
        return bad();
      }
      s.remove_prefix(close + 1);
    } else if (ConsumeOrders(&s, 2, o)) {
      o[2] = o[0];
    } else {
      return bad();
    }
    spec.arch_order = o[0];
    spec.garch_order = o[1];
    spec.asym_order = o[2];
  } else {
    return bad();
  }
  if (s == "/student") {
    spec.innovations = Innovations::kStudentT;
  } else if (s == "/gaussian") {
    spec.innovations = Innovations::kNormal;
  } else {
    return bad();
  }
  if (absl::Status st = spec.Validate(); !st.ok()) {
    return absl::InvalidArgumentError(absl::StrCat("'", label, "': ", st.message()));
  }
  return spec;
}

absl::StatusOr<std::vector<StoredModel>> ParseModelRecords(absl::string_view text,
                                                           absl::string_view name) {
  std::map<std::string, StoredModel> latest;  // sorted by symbol
  int line_no = 0;
  for (absl::string_view line : absl::StrSplit(text, '\n')) {
    ++line_no;
    line = absl::StripAsciiWhitespace(line);
    if (line.empty()) continue;
    nlohmann::json j = nlohmann::json::parse(line.begin(), line.end(), nullptr,
                                             /*allow_exceptions=*/false);
    if (j.is_discarded() || !j.is_object()) {
      return LineError(name, line_no, "not a JSON object (expected one model record a line)");
    }
    const auto outcome = j.find("outcome");
    if (outcome == j.end() || !outcome->is_string()) {
      return LineError(name, line_no, "no \"outcome\" string: not a model record");
    }
    if (outcome->get<std::string>() != RefitOutcomeName(RefitOutcome::kSwapped)) continue;
    const auto sym = j.find("symbol");
    if (sym == j.end() || !sym->is_string() || !IsValidSymbol(sym->get<std::string>())) {
      return LineError(name, line_no, "\"symbol\" missing or not a valid symbol");
    }
    StoredModel m;
    m.symbol = sym->get<std::string>();
    m.line = line_no;
    const std::string who = absl::StrCat("symbol ", m.symbol, ": ");
    const auto ver = j.find("version");
    if (ver == j.end() || !ver->is_number_unsigned() || ver->get<uint64_t>() < 1 ||
        ver->get<uint64_t>() > 0xFFFFFFFFull) {
      return LineError(name, line_no, who + "\"version\" must be an integer >= 1");
    }
    m.version = static_cast<uint32_t>(ver->get<uint64_t>());
    const auto spec_label = j.find("spec");
    if (spec_label == j.end() || !spec_label->is_string()) {
      return LineError(name, line_no, who + "\"spec\" missing");
    }
    absl::StatusOr<ModelSpec> spec = ParseSpecLabel(spec_label->get<std::string>());
    if (!spec.ok()) return LineError(name, line_no, who + std::string(spec.status().message()));
    if (spec->variance == VarianceKind::kEwma) {
      return LineError(name, line_no, who + "an EWMA record is not a fitted model");
    }
    const auto params = j.find("estimates");
    if (params == j.end() || !params->is_array()) {
      if (j.contains("params")) {
        return LineError(name, line_no,
                         who + "a record of the retired format: " +
                             RenameHint(RenameKind::kJsonKey, "model record", "params"));
      }
      return LineError(name, line_no, who + "\"estimates\" must be an array");
    }
    std::vector<std::pair<std::string, double>> named;
    std::vector<double> se;
    bool all_se = true;
    for (const nlohmann::json& p : *params) {
      if (!p.is_object() || !p.contains("name") || !p["name"].is_string() ||
          !p.contains("value") || !p["value"].is_number()) {
        return LineError(name, line_no,
                         who + "each parameter needs a \"name\" string and a numeric \"value\"");
      }
      named.emplace_back(p["name"].get<std::string>(), p["value"].get<double>());
      if (p.contains("se_hessian") && p["se_hessian"].is_number()) {
        se.push_back(p["se_hessian"].get<double>());
      } else {
        all_se = false;
      }
    }
    absl::StatusOr<ModelParams> mp = ModelParams::FromNamed(*spec, named);
    if (!mp.ok()) {
      return LineError(name, line_no,
                       absl::StrCat(who, "parameters do not match ", spec_label->get<std::string>(),
                                    ": ", mp.status().message()));
    }
    if (absl::Status st = mp->CheckConstraints(); !st.ok()) {
      return LineError(name, line_no,
                       absl::StrCat(who, "parameters fail the model's constraints: ", st.message()));
    }
    // FromNamed accepts any order; keep the spec's order for every consumer.
    m.params = *std::move(mp);
    if (all_se && se.size() == named.size()) {
      m.std_errors.assign(m.params.values.size(), 0.0);
      const std::vector<std::string> order = m.params.spec.ParamNames();
      for (size_t i = 0; i < named.size(); ++i) {
        const size_t k = static_cast<size_t>(
            std::find(order.begin(), order.end(), named[i].first) - order.begin());
        if (k < m.std_errors.size()) m.std_errors[k] = se[i];
      }
    }
    if (j.contains("log_likelihood") && j["log_likelihood"].is_number()) {
      m.loglik = j["log_likelihood"].get<double>();
    }
    if (j.contains("scheduled_bar") && j["scheduled_bar"].is_number_integer()) {
      m.scheduled_bar = j["scheduled_bar"].get<int64_t>();
    }
    if (j.contains("applied_bar") && j["applied_bar"].is_number_integer()) {
      m.applied_bar = j["applied_bar"].get<int64_t>();
    }
    if (j.contains("t_ns") && j["t_ns"].is_number_integer()) m.t_ns = j["t_ns"].get<int64_t>();
    const std::string key = m.symbol;
    latest[key] = std::move(m);  // the last swapped record wins
  }
  std::vector<StoredModel> out;
  out.reserve(latest.size());
  for (auto& [symbol, m] : latest) out.push_back(std::move(m));
  return out;
}

absl::StatusOr<std::vector<StoredModel>> ReadModelRecordsFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return absl::NotFoundError(absl::StrCat("cannot open the model file '", path, "'"));
  std::ostringstream buf;
  buf << in.rdbuf();
  return ParseModelRecords(buf.str(), path);
}

RefitRecord ToRefitRecord(const StoredModel& m) {
  RefitRecord r;
  r.symbol = m.symbol;
  r.outcome = RefitOutcome::kSwapped;
  r.version = m.version;
  r.scheduled_bar = std::max<int64_t>(m.scheduled_bar, 0);
  r.applied_bar = std::max<int64_t>(m.applied_bar, 0);
  r.t_ns = m.t_ns;
  r.spec = m.params.spec.Label();
  r.names = m.params.spec.ParamNames();
  r.values = m.params.values;
  r.std_errors = m.std_errors;
  r.loglik = m.loglik;
  r.bic = std::numeric_limits<double>::quiet_NaN();
  r.converged = true;
  r.note = "exported";
  return r;
}

absl::Status CheckStoredModels(const std::vector<StoredModel>& models,
                               const OutputOptions& outputs, absl::string_view name) {
  for (const StoredModel& m : models) {
    absl::StatusOr<FilterModel> model = FilterModel::Create(m.params, outputs, m.version);
    if (!model.ok()) {
      return LineError(name, m.line,
                       absl::StrCat("symbol ", m.symbol, ": ", model.status().message()));
    }
  }
  return absl::OkStatus();
}

double VarianceHalfLifeBars(const ModelParams& params) {
  const double p = params.spec.variance == VarianceKind::kEwma ? params.lambda()
                                                               : params.Persistence();
  if (!(p > 0)) return 0.0;
  if (p >= 1) return std::numeric_limits<double>::infinity();
  return std::log(0.5) / std::log(p);
}

absl::StatusOr<std::vector<StoredModel>> LoadInitialModels(const std::string& path,
                                                           const OutputOptions& outputs) {
  auto models = ReadModelRecordsFile(path);
  if (!models.ok()) return models.status();
  if (absl::Status s = CheckStoredModels(*models, outputs, path); !s.ok()) return s;
  return models;
}

}  // namespace aftershock
