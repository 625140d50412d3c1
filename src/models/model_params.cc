#include "aftershock/model_params.h"

#include <cmath>
#include <limits>

#include "absl/strings/str_cat.h"

namespace aftershock {

double ModelParams::mu() const { return values[0]; }
double ModelParams::ar(int i) const { return values[1 + i]; }
double ModelParams::ma(int i) const { return values[1 + spec.ar_order + i]; }
double ModelParams::omega() const { return values[spec.VarianceOffset()]; }
double ModelParams::alpha(int i) const { return values[spec.VarianceOffset() + 1 + i]; }
double ModelParams::gamma(int i) const {
  return values[spec.VarianceOffset() + 1 + spec.arch_order + i];
}
double ModelParams::beta(int i) const {
  return values[spec.VarianceOffset() + 1 + spec.arch_order + spec.asym_order + i];
}
double ModelParams::lambda() const { return values[spec.VarianceOffset()]; }
double ModelParams::nu() const { return values[spec.DistOffset()]; }

double ModelParams::Persistence() const {
  switch (spec.variance) {
    case VarianceKind::kConstant:
      return 0.0;
    case VarianceKind::kEwma:
      return 1.0;
    default:
      break;
  }
  double p = 0.0;
  for (int i = 0; i < spec.arch_order; ++i) p += alpha(i);
  for (int i = 0; i < spec.asym_order; ++i) p += 0.5 * gamma(i);
  for (int i = 0; i < spec.garch_order; ++i) p += beta(i);
  return p;
}

double ModelParams::UnconditionalVariance() const {
  if (spec.variance == VarianceKind::kEwma) return std::numeric_limits<double>::infinity();
  const double p = Persistence();
  if (p >= 1.0) return std::numeric_limits<double>::infinity();
  return omega() / (1.0 - p);
}

absl::StatusOr<double> ModelParams::Get(absl::string_view name) const {
  const auto names = spec.ParamNames();
  for (size_t i = 0; i < names.size() && i < values.size(); ++i) {
    if (names[i] == name) return values[i];
  }
  return absl::NotFoundError(absl::StrCat("model ", spec.Label(), " has no parameter '", name, "'"));
}

absl::Status ModelParams::CheckConstraints() const {
  if (auto s = spec.Validate(); !s.ok()) return s;
  const auto names = spec.ParamNames();
  if (values.size() != names.size()) {
    return absl::InvalidArgumentError(absl::StrCat("model ", spec.Label(), " needs ", names.size(),
                                                   " parameters, got ", values.size()));
  }
  for (size_t i = 0; i < values.size(); ++i) {
    if (!std::isfinite(values[i])) {
      return absl::InvalidArgumentError(absl::StrCat("parameter ", names[i], " is not finite"));
    }
  }
  const int v0 = spec.VarianceOffset();
  if (spec.variance == VarianceKind::kEwma) {
    if (!(lambda() > 0.0 && lambda() < 1.0)) {
      return absl::InvalidArgumentError(absl::StrCat("lambda must be in (0,1), got ", lambda()));
    }
  } else {
    if (!(omega() > 0.0)) {
      return absl::InvalidArgumentError(absl::StrCat("omega must be > 0, got ", omega()));
    }
    for (int i = v0 + 1; i < v0 + spec.NumVarianceParams(); ++i) {
      if (values[i] < 0.0) {
        return absl::InvalidArgumentError(
            absl::StrCat(names[i], " must be >= 0, got ", values[i]));
      }
    }
    const double p = Persistence();
    if (!(p <= kMaxPersistence)) {
      return absl::InvalidArgumentError(
          absl::StrCat("persistence must be < 1, got ", p, " (variance is not stationary)"));
    }
  }
  if (spec.innovations == Innovations::kStudentT) {
    if (!(nu() > 2.0 && nu() <= kMaxNu)) {
      return absl::InvalidArgumentError(
          absl::StrCat("nu must be in (2, ", kMaxNu, "], got ", nu()));
    }
  }
  return absl::OkStatus();
}

absl::StatusOr<ModelParams> ModelParams::FromNamed(
    const ModelSpec& spec, const std::vector<std::pair<std::string, double>>& named) {
  if (auto s = spec.Validate(); !s.ok()) return s;
  const auto names = spec.ParamNames();
  ModelParams p;
  p.spec = spec;
  p.values.assign(names.size(), std::numeric_limits<double>::quiet_NaN());
  std::vector<bool> seen(names.size(), false);
  for (const auto& [name, value] : named) {
    size_t i = 0;
    while (i < names.size() && names[i] != name) ++i;
    if (i == names.size()) {
      return absl::InvalidArgumentError(
          absl::StrCat("parameter '", name, "' does not belong to model ", spec.Label()));
    }
    if (seen[i]) {
      return absl::InvalidArgumentError(absl::StrCat("parameter '", name, "' given twice"));
    }
    seen[i] = true;
    p.values[i] = value;
  }
  for (size_t i = 0; i < names.size(); ++i) {
    if (!seen[i]) {
      return absl::InvalidArgumentError(
          absl::StrCat("model ", spec.Label(), " needs parameter '", names[i], "'"));
    }
  }
  return p;
}

}  // namespace aftershock

namespace aftershock {

void SaveModelParams(const ModelParams& params, StateWriter* w) {
  const ModelSpec& s = params.spec;
  w->U8(static_cast<uint8_t>(s.mean));
  w->U8(static_cast<uint8_t>(s.ar_order));
  w->U8(static_cast<uint8_t>(s.ma_order));
  w->U8(static_cast<uint8_t>(s.variance));
  w->U8(static_cast<uint8_t>(s.arch_order));
  w->U8(static_cast<uint8_t>(s.asym_order));
  w->U8(static_cast<uint8_t>(s.garch_order));
  w->U8(static_cast<uint8_t>(s.innovations));
  w->U64(params.values.size());
  for (double v : params.values) w->F64(v);
}

ModelParams RestoreModelParams(StateReader* r, absl::string_view what) {
  ModelParams p;
  const std::string field = absl::StrCat(what, " spec");
  const uint8_t mean = r->U8(field);
  p.spec.ar_order = r->U8(field);
  p.spec.ma_order = r->U8(field);
  const uint8_t variance = r->U8(field);
  p.spec.arch_order = r->U8(field);
  p.spec.asym_order = r->U8(field);
  p.spec.garch_order = r->U8(field);
  const uint8_t innovations = r->U8(field);
  // The longest parameter vector: mean, AR, MA, omega, ARCH, GJR, GARCH, nu.
  constexpr uint64_t kMaxParams = 3 + 2 * kMaxArmaOrder + kMaxArchOrder + 2 * kMaxGarchOrder;
  const uint64_t n = r->Count(absl::StrCat(what, " parameter count"), kMaxParams);
  if (!r->ok()) return p;
  if (mean > static_cast<uint8_t>(MeanKind::kArma) ||
      variance > static_cast<uint8_t>(VarianceKind::kEwma) ||
      innovations > static_cast<uint8_t>(Innovations::kStudentT)) {
    r->Fail(field, "unknown mean, variance or innovation kind");
    return p;
  }
  p.spec.mean = static_cast<MeanKind>(mean);
  p.spec.variance = static_cast<VarianceKind>(variance);
  p.spec.innovations = static_cast<Innovations>(innovations);
  p.values.resize(n);
  for (uint64_t i = 0; i < n; ++i) p.values[i] = r->F64(absl::StrCat(what, " parameters"));
  if (!r->ok()) return p;
  if (absl::Status s = p.spec.Validate(); !s.ok()) {
    r->Fail(field, s.message());
  } else if (absl::Status c = p.CheckConstraints(); !c.ok()) {
    r->Fail(absl::StrCat(what, " parameters"), c.message());
  }
  return p;
}

}  // namespace aftershock
