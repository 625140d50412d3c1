// Rendering of a FitResult as a readable text report or as JSON (the schema is
// documented in the README, "aftershock fit").
#ifndef AFTERSHOCK_APP_FIT_REPORT_H_
#define AFTERSHOCK_APP_FIT_REPORT_H_

#include <string>

#include <nlohmann/json.hpp>

#include "aftershock/estimator.h"

namespace aftershock::app {

// A number, or null when not finite (JSON has no NaN).
nlohmann::json JsonNumber(double v);

// The "model" object: mean, mean_order, variance, shock_lags, asym_lags,
// variance_lags, innovations, label.
nlohmann::json ModelSpecJson(const ModelSpec& spec);

// The full fit object (model, estimates, se_hessian, se_robust, log_likelihood,
// likelihood_terms, ...).
nlohmann::json FitResultJson(const FitResult& fit);

// The plain-language verdict that opens the text report, e.g. "memory 0.96:
// a variance shock halves in 17 bars; long-run volatility 0.8 per bar, 12.7 a
// year (252 bars)". `periods_per_year` > 0 annualizes (square-root-of-time).
std::string FitVerdict(const ModelParams& params, double periods_per_year);

// A multi-line text report; `title` heads it (e.g. the input file name). It
// opens with the verdict, then the estimates with standard errors, 95 %
// intervals and p-values; `details` (e.g. residual diagnostics) goes after the
// table, before the closing caution.
std::string FitResultText(const FitResult& fit, const std::string& title,
                          double periods_per_year = 252, const std::string& details = "");

// The one-paragraph caution printed under every report.
extern const char kEstimateCaution[];

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_FIT_REPORT_H_
