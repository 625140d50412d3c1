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

// The "model" object: mean, mean_order, variance, variance_order, innovations.
nlohmann::json ModelSpecJson(const ModelSpec& spec);

// The full fit object (model, params, std_errors, robust_std_errors, loglik, ...).
nlohmann::json FitResultJson(const FitResult& fit);

// A multi-line text report; `title` heads it (e.g. the input file name).
std::string FitResultText(const FitResult& fit, const std::string& title);

// The one-paragraph caution printed under every report.
extern const char kEstimateCaution[];

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_FIT_REPORT_H_
