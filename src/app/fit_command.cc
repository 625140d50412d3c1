// `aftershock fit`: estimate a volatility model on one return series.
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <string>

#include "absl/strings/str_cat.h"
#include "aftershock/engine_config.h"
#include "aftershock/estimator.h"
#include "aftershock/identify.h"
#include "aftershock/series_file.h"
#include "aftershock/tick_file.h"
#include "app/args.h"
#include "app/cli.h"
#include "app/fit_report.h"
#include "app/identify_report.h"

namespace aftershock::app {
namespace {

int Fail(const absl::Status& s, int code) { return ReportFailure("fit", s, code); }

// Prints a report: JSON (with the input named and the caution) or text titled
// by the input file and column.
template <typename TextFn>
void Print(const std::string& format, const ArgParser& args, const Series& series,
           nlohmann::json j, TextFn text) {
  if (format == "json") {
    j["input"] = args.Get("input");
    j["column"] = series.column;
    j["caution"] = "statistical estimate, not advice";
    std::fputs((j.dump(2) + "\n").c_str(), stdout);
    return;
  }
  std::string title = args.Get("input");
  if (!series.column.empty()) title += " (column " + series.column + ")";
  std::fputs(text(title).c_str(), stdout);
}

// The series to fit: a column of a series file, or one instrument's bar
// returns from a tick file (the replay's bar builder). Prices are turned into
// log returns only when asked (--from-prices) or read from ticks.
absl::StatusOr<Series> LoadSeries(const ArgParser& args) {
  const std::string input = args.Get("input");
  auto text = ReadTextFile(input);
  if (!text.ok()) return text.status();
  const std::string name = input == "-" ? "stdin" : input;
  auto scale = args.GetDouble("scale");
  if (!scale.ok()) return scale.status();
  if (!(*scale > 0) || !std::isfinite(*scale)) {
    return absl::InvalidArgumentError("--scale must be a number > 0");
  }
  auto columns = ParseColumnNames(args.Get("columns"));
  if (!columns.ok()) {
    return absl::InvalidArgumentError(absl::StrCat("--", columns.status().message()));
  }
  if (LooksLikeTickFile(*text, *columns)) {
    TickSeriesOptions o;
    o.symbol = args.Get("symbol");
    auto interval = ParseDuration(args.Get("interval"));
    if (!interval.ok()) {
      return absl::InvalidArgumentError(absl::StrCat("--interval: ", interval.status().message()));
    }
    o.interval_ns = *interval;
    o.scale = *scale;
    auto unit = ParseTimeUnit(args.Get("time-unit"));
    if (!unit.ok()) return absl::InvalidArgumentError(absl::StrCat("--", unit.status().message()));
    o.file.time_unit = *unit;
    o.file.column_names = *columns;
    if (args.Has("column")) {
      return absl::InvalidArgumentError(
          absl::StrCat(name, " is a tick file: --column does not apply (use --symbol)"));
    }
    return ReturnsFromTicks(*std::move(text), name, o);
  }
  if (args.Has("symbol")) {
    return absl::InvalidArgumentError(
        absl::StrCat(name, " has no symbol column, so --symbol cannot select an instrument"));
  }
  auto series = ParseSeries(*text, name, args.Get("column"));
  if (!series.ok()) return series.status();
  if (args.Has("from-prices")) {
    auto r = LogReturnsOfPrices(series->values, *scale);
    if (!r.ok()) return absl::InvalidArgumentError(absl::StrCat(name, ": ", r.status().message()));
    series->values = *std::move(r);
    series->column += series->column.empty() ? "log returns" : " (log returns)";
  } else {
    if (series->column == "price" || series->column == "close") {
      return absl::InvalidArgumentError(absl::StrCat(
          name, ": column '", series->column,
          "' holds prices; give --from-prices to fit their log returns"));
    }
    for (double& v : series->values) v *= *scale;
  }
  return series;
}

int RunIdentification(const ArgParser& args, const std::string& format) {
  IdentifyOptions opt;
  const std::string crit = args.Get("criterion");
  if (crit != "aic" && crit != "bic") {
    return Fail(absl::InvalidArgumentError("--criterion must be aic or bic, got '" + crit + "'"),
                2);
  }
  opt.criterion = crit == "aic" ? InfoCriterion::kAic : InfoCriterion::kBic;
  auto mo = args.GetIntList("max-mean-order");
  if (!mo.ok()) return Fail(mo.status(), 2);
  if (mo->size() != 2) {
    return Fail(absl::InvalidArgumentError("--max-mean-order needs two numbers P,Q"), 2);
  }
  opt.max_ar = (*mo)[0];
  opt.max_ma = (*mo)[1];
  auto ma = args.GetInt("max-arch-order");
  if (!ma.ok()) return Fail(ma.status(), 2);
  opt.max_arch_order = static_cast<int>(*ma);
  auto lags = args.GetInt("lags");
  if (!lags.ok()) return Fail(lags.status(), 2);
  opt.lags = static_cast<int>(*lags);
  auto level = args.GetDouble("level");
  if (!level.ok()) return Fail(level.status(), 2);
  opt.level = *level;
  auto presample = ParsePresample(args.Get("presample"));
  if (!presample.ok()) return Fail(presample.status(), 2);
  opt.presample = *presample;
  auto series = LoadSeries(args);
  if (!series.ok()) return Fail(series.status(), 2);
  auto rep = IdentifyModel(series->values, opt);
  if (!rep.ok()) return Fail(rep.status(), 2);
  const double ppy = std::strtod(args.Get("periods-per-year").c_str(), nullptr);
  Print(format, args, *series, IdentificationJson(*rep),
        [&](const std::string& title) { return IdentificationText(*rep, title, ppy); });
  return rep->final_fit.converged ? 0 : 1;
}

}  // namespace

int FitCommand(int argc, char** argv) {
  ArgParser args(
      "aftershock fit",
      "Estimate a conditional-variance model on one return series by constrained maximum\n"
      "likelihood and print the estimates with Hessian and robust (Bollerslev-Wooldridge)\n"
      "standard errors, log-likelihood, AIC and BIC.\n\n"
      "Input: a CSV file with a header row (the first numeric column unless --column is\n"
      "given) or one number a line; '-' reads standard input. Returns are used as given\n"
      "(per cent or fractions; --scale 100 turns fractions into per cent); the estimates\n"
      "are in the same units. A column of prices needs --from-prices (log returns).\n"
      "A tick file (a header with a symbol column, as replay reads) needs --symbol: that\n"
      "instrument's ticks go through replay's bar builder (--interval) and its bar\n"
      "returns are fitted.\n\n"
      "Lags are named: --shock-lags (alpha_i terms on lagged squared shocks),\n"
      "--variance-lags (beta_i terms on lagged variances, garch and gjr), --asym-lags\n"
      "(gamma_i asymmetric terms, gjr only); the ARMA mean takes --mean-order P,Q.\n"
      "Example:\n"
      "  aftershock fit --input returns.csv --mean constant --variance garch "
      "--shock-lags 1 --variance-lags 1\n\n"
      "With --mean auto --variance auto the identification pipeline runs instead: mean\n"
      "order by the criterion, ARCH-effect tests, variance family and order by the\n"
      "criterion (mean fixed), diagnostics, joint re-estimation; the report explains\n"
      "each decision.");
  args.AddOption("input", "FILE", "return series (CSV with header, or one number a line)", "",
                 true);
  args.AddOption("column", "NAME", "CSV column to read (default: first numeric column)");
  args.AddFlag("from-prices", "the column holds prices: fit their log returns");
  args.AddOption("scale", "X", "multiply the returns by X (100: fractions to per cent)", "1");
  args.AddOption("symbol", "NAME", "tick file: the instrument to fit");
  args.AddOption("interval", "DURATION", "tick file: bar length (0s = one bar per tick)", "0s");
  args.AddOption("time-unit", "UNIT",
                 "tick file: unit of numeric times, auto | s | ms | us | ns", "auto");
  args.AddOption("columns", "OURS=THEIRS,...",
                 "tick file: the file's names for our columns, e.g. time=ts,price=last");
  args.AddOption("mean", "KIND", "mean equation: zero | constant | arma | auto", "constant");
  args.AddOption("mean-order", "P,Q", "ARMA orders (with --mean arma)", "1,1");
  args.AddOption("variance", "KIND", "variance equation: flat | arch | garch | gjr | ewma | auto",
                 "garch");
  args.AddOption("shock-lags", "N", "alpha terms on lagged squared shocks (arch, garch, gjr)", "1");
  args.AddOption("variance-lags", "N", "beta terms on lagged variances (garch, gjr)", "1");
  args.AddOption("asym-lags", "N", "gamma asymmetric terms (gjr; default: the shock lags)");
  args.AddOption("innovations", "LAW",
                 "innovation law: gaussian | student (Student-t scaled to unit variance)",
                 "gaussian");
  args.AddOption("presample", "RULE",
                 "presample variance: mean-square (mean of all squared residuals) | "
                 "robust-start (squared robust scale of the first bars, half-life 10)",
                 "mean-square");
  args.AddOption("ewma-lambda", "X", "decay of the EWMA variance (fixed, not estimated)",
                 "0.94");
  args.AddOption("format", "FMT", "output: text | json", "text");
  args.AddOption("periods-per-year", "N",
                 "bars per year for the text verdict's annual volatility (square root of time)",
                 "252");
  args.AddOption("criterion", "IC", "auto: information criterion, aic | bic", "bic");
  args.AddOption("max-mean-order", "P,Q", "auto: largest ARMA orders tried", "2,2");
  args.AddOption("max-arch-order", "M", "auto: largest ARCH order tried", "5");
  args.AddOption("lags", "L", "auto: lags of the Ljung-Box tests and the PACF", "10");
  args.AddOption("level", "A", "auto: significance level of the tests", "0.05");
  if (auto s = args.Parse(argc, argv); !s.ok()) return Fail(s, 2);
  if (args.HelpRequested()) {
    std::fputs(args.Help().c_str(), stdout);
    return 0;
  }
  const std::string format = args.Get("format");
  if (format != "text" && format != "json") {
    return Fail(absl::InvalidArgumentError("--format must be text or json, got '" + format + "'"),
                2);
  }
  auto periods_per_year = args.GetDouble("periods-per-year");
  if (!periods_per_year.ok()) return Fail(periods_per_year.status(), 2);
  if (!(*periods_per_year > 0)) {
    return Fail(absl::InvalidArgumentError("--periods-per-year must be > 0"), 2);
  }
  const bool auto_mean = args.Get("mean") == "auto", auto_var = args.Get("variance") == "auto";
  if (auto_mean || auto_var) {
    if (!(auto_mean && auto_var)) {
      return Fail(absl::InvalidArgumentError(
                      "automatic identification needs both --mean auto and --variance auto"),
                  2);
    }
    return RunIdentification(args, format);
  }
  auto mean_order = args.GetIntList("mean-order");
  if (!mean_order.ok()) return Fail(mean_order.status(), 2);
  // A lag given on the command line must fit the variance kind; the defaults
  // (1) apply only where the kind has such terms.
  VarianceLags lags;
  const std::string variance = args.Get("variance");
  for (auto [flag, out] : {std::pair<const char*, int*>{"shock-lags", &lags.shock},
                           {"variance-lags", &lags.variance},
                           {"asym-lags", &lags.asym}}) {
    if (!args.Has(flag)) continue;
    auto v = args.GetInt(flag);
    if (!v.ok()) return Fail(v.status(), 2);
    if (*v < 0 || *v > 1000) {
      return Fail(absl::InvalidArgumentError(absl::StrCat("--", flag, " must be in 0..1000")), 2);
    }
    *out = static_cast<int>(*v);
  }
  const std::string mean = args.Get("mean");
  auto spec = MakeModelSpec(mean, mean == "arma" ? *mean_order : std::vector<int>{}, variance, lags,
                            args.Get("innovations"));
  if (!spec.ok()) return Fail(spec.status(), 2);
  FitOptions options;
  auto presample = ParsePresample(args.Get("presample"));
  if (!presample.ok()) return Fail(presample.status(), 2);
  options.presample = *presample;
  auto lambda = args.GetDouble("ewma-lambda");
  if (!lambda.ok()) return Fail(lambda.status(), 2);
  if (!(*lambda > 0 && *lambda < 1)) {
    return Fail(absl::InvalidArgumentError("--ewma-lambda must be in (0,1)"), 2);
  }
  options.ewma_lambda = *lambda;

  auto series = LoadSeries(args);
  if (!series.ok()) return Fail(series.status(), 2);
  options.keep_series = true;  // for the residual diagnostics of the text report
  auto fit = FitModel(*spec, series->values, options);
  if (!fit.ok()) return Fail(fit.status(), 2);
  std::string diagnostics;
  if (format == "text" && !fit->residuals.empty() && fit->sigma2.size() == fit->residuals.size()) {
    IdentifyOptions io;
    auto tests = StandardizedResidualDiagnostics(fit->residuals, fit->sigma2,
                                                 spec->ar_order + spec->ma_order, io);
    diagnostics = absl::StrCat("\nDiagnostics of the standardized residuals (level ", io.level,
                               ")\n", DiagnosticsText(tests));
  }

  Print(format, args, *series, FitResultJson(*fit), [&](const std::string& title) {
    return FitResultText(*fit, title, *periods_per_year, diagnostics);
  });
  return fit->converged ? 0 : 1;
}

}  // namespace aftershock::app
