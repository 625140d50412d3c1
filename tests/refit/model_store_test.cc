// Model store: spec labels, model-file parsing (the last swapped record per
// symbol wins, other outcomes skipped, errors with file:line), the export
// record round trip and the variance half-life.
#include "aftershock/model_store.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "absl/strings/str_cat.h"

namespace aftershock {
namespace {

ModelParams Garch(double mu, double omega, double alpha, double beta) {
  ModelSpec spec;  // constant mean, GARCH(1,1), normal
  auto p = ModelParams::FromNamed(
      spec, {{"mu", mu}, {"omega", omega}, {"alpha_1", alpha}, {"beta_1", beta}});
  REQUIRE(p.ok());
  return *p;
}

std::string Record(const std::string& symbol, const std::string& outcome, uint32_t version,
                   double beta) {
  RefitRecord r;
  r.symbol = symbol;
  r.outcome = outcome == "swapped" ? RefitOutcome::kSwapped : RefitOutcome::kRejected;
  r.version = version;
  const ModelParams p = Garch(1e-4, 2e-8, 0.08, beta);
  r.spec = p.spec.Label();
  r.names = p.spec.ParamNames();
  r.values = p.values;
  r.std_errors = {1e-5, 1e-9, 0.01, 0.02};
  r.scheduled_bar = 100 * version;
  r.applied_bar = 100 * version + 5;
  r.t_ns = 1000 + version;
  r.loglik = 123.5;
  return EncodeRefitRecordJson(r);
}

TEST_CASE("ParseSpecLabel reads every label ModelSpec::Label writes", "[refit][models]") {
  std::vector<ModelSpec> specs;
  for (auto mean : {MeanKind::kZero, MeanKind::kConstant, MeanKind::kArma}) {
    for (auto var : {VarianceKind::kConstant, VarianceKind::kArch, VarianceKind::kGarch,
                     VarianceKind::kGjr, VarianceKind::kEwma}) {
      for (auto inn : {Innovations::kNormal, Innovations::kStudentT}) {
        ModelSpec s;
        s.mean = mean;
        s.ar_order = mean == MeanKind::kArma ? 2 : 0;
        s.ma_order = mean == MeanKind::kArma ? 1 : 0;
        s.variance = var;
        s.arch_order = var == VarianceKind::kConstant || var == VarianceKind::kEwma ? 0 : 2;
        // Asym lags 1 (label "GJR-GARCH(2,3;1)") and equal to the shock lags
        // ("GJR-GARCH(2,3)").
        s.asym_order = var == VarianceKind::kGjr ? (inn == Innovations::kNormal ? 1 : 2) : 0;
        s.garch_order = var == VarianceKind::kGarch || var == VarianceKind::kGjr ? 3 : 0;
        s.innovations = inn;
        REQUIRE(s.Validate().ok());
        specs.push_back(s);
      }
    }
  }
  for (const ModelSpec& s : specs) {
    INFO(s.Label());
    auto parsed = ParseSpecLabel(s.Label());
    REQUIRE(parsed.ok());
    CHECK(*parsed == s);
  }
  CHECK(ParseSpecLabel("const/GJR-GARCH(1,1)/student")->asym_order == 1);
  for (const char* bad : {"", "GARCH(1,1)", "const/GARCH(1)/gaussian", "const/GARCH(1,1)/cauchy",
                          "ARMA(9,9)/GARCH(1,1)/gaussian", "const/GARCH(1,1)/gaussian/extra",
                          "const/GJR-GARCH(1,1;)/gaussian", "const/GJR-GARCH(1;1)/gaussian",
                          "const/GJR-GARCH(1,1;x)/gaussian", "constant/GARCH(1,1)/gaussian"}) {
    INFO(bad);
    CHECK_FALSE(ParseSpecLabel(bad).ok());
  }
  // The retired labels are refused with a pointer to the new form.
  auto old = ParseSpecLabel("constant-mean-GARCH(1,1)-t");
  REQUIRE_FALSE(old.ok());
  CHECK(std::string(old.status().message()) ==
        "'constant-mean-GARCH(1,1)-t' is not a model label (e.g. const/GARCH(1,1)/student; labels "
        "were renamed, e.g. constant-mean-GARCH(1,1)-t is now const/GARCH(1,1)/student "
        "(CHANGELOG.md))");
}

TEST_CASE("ParseModelRecords: the last swapped record of each symbol wins", "[refit][models]") {
  const std::string text = absl::StrCat(Record("B.X", "swapped", 1, 0.85), "\n",
                                        Record("A.Y", "swapped", 3, 0.80), "\n\n",
                                        Record("B.X", "swapped", 2, 0.88), "\n",
                                        Record("B.X", "rejected", 2, 0.99), "\n");
  auto models = ParseModelRecords(text, "m.jsonl");
  REQUIRE(models.ok());
  REQUIRE(models->size() == 2);
  const StoredModel& a = (*models)[0];
  const StoredModel& b = (*models)[1];
  CHECK(a.symbol == "A.Y");
  CHECK(a.version == 3);
  CHECK(a.line == 2);
  CHECK(b.symbol == "B.X");
  CHECK(b.version == 2);
  CHECK(b.line == 4);
  CHECK(b.params.beta(0) == 0.88);
  CHECK(b.scheduled_bar == 200);
  CHECK(b.applied_bar == 205);
  CHECK(b.t_ns == 1002);
  CHECK(b.loglik == 123.5);
  REQUIRE(b.std_errors.size() == 4);
  CHECK(b.std_errors[3] == 0.02);

  // The export record reads back as the same model.
  auto again = ParseModelRecords(EncodeRefitRecordJson(ToRefitRecord(b)), "e.jsonl");
  REQUIRE(again.ok());
  REQUIRE(again->size() == 1);
  CHECK((*again)[0].version == b.version);
  CHECK((*again)[0].params.spec == b.params.spec);
  CHECK((*again)[0].params.values == b.params.values);
  CHECK((*again)[0].std_errors == b.std_errors);
}

TEST_CASE("ParseModelRecords names the file, line and problem", "[refit][models]") {
  const std::string good = Record("A.Y", "swapped", 1, 0.85);
  auto err = [&](const std::string& second) {
    auto r = ParseModelRecords(good + "\n" + second + "\n", "m.jsonl");
    REQUIRE_FALSE(r.ok());
    return std::string(r.status().message());
  };
  CHECK(err("[1,2]").rfind("m.jsonl:2: not a JSON object", 0) == 0);
  CHECK(err("{\"x\":1}").rfind("m.jsonl:2: no \"outcome\"", 0) == 0);
  std::string s = Record("B.X", "swapped", 1, 0.95);  // persistence 1.03
  CHECK(err(s).rfind("m.jsonl:2: symbol B.X: parameters fail the model's constraints", 0) == 0);
  s = Record("B.X", "swapped", 1, 0.85);
  s.replace(s.find("\"version\":1"), 11, "\"version\":0");
  CHECK(err(s).rfind("m.jsonl:2: symbol B.X: \"version\" must be an integer >= 1", 0) == 0);
  s = Record("B.X", "swapped", 1, 0.85);
  s.replace(s.find("GARCH(1,1)"), 10, "GJR-GARCH(1,1)");
  CHECK(err(s).rfind("m.jsonl:2: symbol B.X: parameters do not match", 0) == 0);
  CHECK(ReadModelRecordsFile("/nonexistent/m.jsonl").status().code() ==
        absl::StatusCode::kNotFound);
}

TEST_CASE("VarianceHalfLifeBars", "[refit][models]") {
  // ln(1/2) / ln(0.9) = 6.5788 bars (0.9^6.5788 = 0.5).
  CHECK(VarianceHalfLifeBars(Garch(0, 1e-6, 0.1, 0.8)) == Approx(6.578813478));
  ModelSpec c;
  c.variance = VarianceKind::kConstant;
  c.arch_order = c.garch_order = 0;
  auto p = ModelParams::FromNamed(c, {{"mu", 0.0}, {"omega", 1e-6}});
  REQUIRE(p.ok());
  CHECK(VarianceHalfLifeBars(*p) == 0.0);
}

}  // namespace
}  // namespace aftershock
