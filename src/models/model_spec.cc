#include "aftershock/model_spec.h"

#include "absl/strings/str_cat.h"
#include "absl/strings/str_join.h"
#include "aftershock/renames.h"

namespace aftershock {

int ModelSpec::NumMeanParams() const {
  switch (mean) {
    case MeanKind::kZero:
      return 0;
    case MeanKind::kConstant:
      return 1;
    case MeanKind::kArma:
      return 1 + ar_order + ma_order;
  }
  return 0;
}

int ModelSpec::NumVarianceParams() const {
  switch (variance) {
    case VarianceKind::kConstant:
      return 1;
    case VarianceKind::kArch:
      return 1 + arch_order;
    case VarianceKind::kGarch:
      return 1 + arch_order + garch_order;
    case VarianceKind::kGjr:
      return 1 + arch_order + asym_order + garch_order;
    case VarianceKind::kEwma:
      return 1;
  }
  return 0;
}

int ModelSpec::NumDistParams() const { return innovations == Innovations::kStudentT ? 1 : 0; }

std::vector<std::string> ModelSpec::ParamNames() const {
  std::vector<std::string> names;
  if (mean != MeanKind::kZero) names.push_back("mu");
  for (int i = 1; i <= ar_order; ++i) names.push_back(absl::StrCat("ar_", i));
  for (int i = 1; i <= ma_order; ++i) names.push_back(absl::StrCat("ma_", i));
  if (variance == VarianceKind::kEwma) {
    names.push_back("lambda");
  } else {
    names.push_back("omega");
    if (variance != VarianceKind::kConstant) {
      for (int i = 1; i <= arch_order; ++i) names.push_back(absl::StrCat("alpha_", i));
      for (int i = 1; i <= asym_order; ++i) names.push_back(absl::StrCat("gamma_", i));
      for (int i = 1; i <= garch_order; ++i) names.push_back(absl::StrCat("beta_", i));
    }
  }
  if (innovations == Innovations::kStudentT) names.push_back("nu");
  return names;
}

std::string ModelSpec::Label() const {
  std::string out;
  switch (mean) {
    case MeanKind::kZero:
      out = "zero";
      break;
    case MeanKind::kConstant:
      out = "const";
      break;
    case MeanKind::kArma:
      out = absl::StrCat("ARMA(", ar_order, ",", ma_order, ")");
      break;
  }
  switch (variance) {
    case VarianceKind::kConstant:
      absl::StrAppend(&out, "/flat");
      break;
    case VarianceKind::kArch:
      absl::StrAppend(&out, "/ARCH(", arch_order, ")");
      break;
    case VarianceKind::kGarch:
      absl::StrAppend(&out, "/GARCH(", arch_order, ",", garch_order, ")");
      break;
    case VarianceKind::kGjr:
      // The GJR-GARCH(p,q) of the literature pairs every shock lag with an
      // asymmetric term; other asym counts follow a semicolon.
      absl::StrAppend(&out, "/GJR-GARCH(", arch_order, ",", garch_order);
      if (asym_order != arch_order) absl::StrAppend(&out, ";", asym_order);
      absl::StrAppend(&out, ")");
      break;
    case VarianceKind::kEwma:
      absl::StrAppend(&out, "/EWMA");
      break;
  }
  absl::StrAppend(&out, "/", InnovationsName(innovations));
  return out;
}

absl::Status ModelSpec::Validate() const {
  if (mean == MeanKind::kArma) {
    if (ar_order < 0 || ar_order > kMaxArmaOrder || ma_order < 0 || ma_order > kMaxArmaOrder) {
      return absl::InvalidArgumentError(absl::StrCat("ARMA orders must be in 0..", kMaxArmaOrder,
                                                     ", got (", ar_order, ",", ma_order, ")"));
    }
  } else if (ar_order != 0 || ma_order != 0) {
    return absl::InvalidArgumentError("ARMA orders are only allowed with mean 'arma'");
  }
  switch (variance) {
    case VarianceKind::kConstant:
    case VarianceKind::kEwma:
      if (arch_order != 0 || asym_order != 0 || garch_order != 0) {
        return absl::InvalidArgumentError(
            absl::StrCat("variance '", VarianceKindName(variance), "' takes no lags"));
      }
      break;
    case VarianceKind::kArch:
      if (arch_order < 1 || arch_order > kMaxArchOrder || asym_order != 0 || garch_order != 0) {
        return absl::InvalidArgumentError(
            absl::StrCat("ARCH shock_lags must be in 1..", kMaxArchOrder, ", got ", arch_order));
      }
      break;
    case VarianceKind::kGarch:
    case VarianceKind::kGjr:
      if (arch_order < 1 || arch_order > kMaxGarchOrder) {
        return absl::InvalidArgumentError(
            absl::StrCat("GARCH shock_lags must be in 1..", kMaxGarchOrder, ", got ", arch_order));
      }
      if (garch_order < 0 || garch_order > kMaxGarchOrder) {
        return absl::InvalidArgumentError(absl::StrCat("GARCH variance_lags must be in 0..",
                                                       kMaxGarchOrder, ", got ", garch_order));
      }
      if (variance == VarianceKind::kGarch && asym_order != 0) {
        return absl::InvalidArgumentError("asymmetric terms (asym_lags) need variance 'gjr'");
      }
      if (variance == VarianceKind::kGjr && (asym_order < 1 || asym_order > kMaxGarchOrder)) {
        return absl::InvalidArgumentError(
            absl::StrCat("GJR-GARCH asym_lags must be in 1..", kMaxGarchOrder));
      }
      break;
  }
  return absl::OkStatus();
}

bool ModelSpec::operator==(const ModelSpec& o) const {
  return mean == o.mean && ar_order == o.ar_order && ma_order == o.ma_order &&
         variance == o.variance && arch_order == o.arch_order && asym_order == o.asym_order &&
         garch_order == o.garch_order && innovations == o.innovations;
}

absl::string_view MeanKindName(MeanKind k) {
  switch (k) {
    case MeanKind::kZero:
      return "zero";
    case MeanKind::kConstant:
      return "constant";
    case MeanKind::kArma:
      return "arma";
  }
  return "?";
}

absl::string_view VarianceKindName(VarianceKind k) {
  switch (k) {
    case VarianceKind::kConstant:
      return "flat";
    case VarianceKind::kArch:
      return "arch";
    case VarianceKind::kGarch:
      return "garch";
    case VarianceKind::kGjr:
      return "gjr";
    case VarianceKind::kEwma:
      return "ewma";
  }
  return "?";
}

absl::string_view InnovationsName(Innovations k) {
  return k == Innovations::kStudentT ? "student" : "gaussian";
}

absl::string_view PresampleName(Presample p) {
  return p == Presample::kRobustStart ? "robust-start" : "mean-square";
}

namespace {

// " ('x' was renamed: use y ...)" for a retired word, else "".
std::string ValueHint(absl::string_view what, absl::string_view s) {
  const std::string hint = RenameHint(RenameKind::kValue, what, s);
  return hint.empty() ? "" : absl::StrCat("; ", hint);
}

}  // namespace

absl::StatusOr<MeanKind> ParseMeanKind(absl::string_view s) {
  if (s == "zero") return MeanKind::kZero;
  if (s == "constant") return MeanKind::kConstant;
  if (s == "arma") return MeanKind::kArma;
  return absl::InvalidArgumentError(
      absl::StrCat("unknown mean '", s, "' (expected zero, constant or arma)"));
}

absl::StatusOr<VarianceKind> ParseVarianceKind(absl::string_view s) {
  if (s == "flat") return VarianceKind::kConstant;
  if (s == "arch") return VarianceKind::kArch;
  if (s == "garch") return VarianceKind::kGarch;
  if (s == "gjr") return VarianceKind::kGjr;
  if (s == "ewma") return VarianceKind::kEwma;
  return absl::InvalidArgumentError(absl::StrCat("unknown variance '", s,
                                                 "' (expected flat, arch, garch, gjr or ewma)",
                                                 ValueHint("variance", s)));
}

absl::StatusOr<Innovations> ParseInnovations(absl::string_view s) {
  if (s == "gaussian") return Innovations::kNormal;
  if (s == "student") return Innovations::kStudentT;
  return absl::InvalidArgumentError(absl::StrCat(
      "unknown innovations '", s, "' (expected gaussian or student)", ValueHint("innovations", s)));
}

absl::StatusOr<Presample> ParsePresample(absl::string_view s) {
  if (s == "mean-square") return Presample::kMeanSquare;
  if (s == "robust-start") return Presample::kRobustStart;
  return absl::InvalidArgumentError(absl::StrCat("unknown presample rule '", s,
                                                 "' (expected mean-square or robust-start)",
                                                 ValueHint("presample", s)));
}

absl::StatusOr<ModelSpec> MakeModelSpec(absl::string_view mean, const std::vector<int>& mean_order,
                                        absl::string_view variance, const VarianceLags& lags,
                                        absl::string_view innovations) {
  ModelSpec spec;
  auto m = ParseMeanKind(mean);
  if (!m.ok()) return m.status();
  auto v = ParseVarianceKind(variance);
  if (!v.ok()) return v.status();
  auto in = ParseInnovations(innovations);
  if (!in.ok()) return in.status();
  spec.mean = *m;
  spec.variance = *v;
  spec.innovations = *in;
  spec.ar_order = spec.ma_order = 0;
  if (spec.mean == MeanKind::kArma) {
    if (mean_order.empty()) {
      spec.ar_order = spec.ma_order = 1;
    } else if (mean_order.size() == 2) {
      spec.ar_order = mean_order[0];
      spec.ma_order = mean_order[1];
    } else {
      return absl::InvalidArgumentError("mean order for 'arma' must be two numbers P,Q");
    }
  } else if (!mean_order.empty()) {
    return absl::InvalidArgumentError(
        absl::StrCat("mean '", mean, "' takes no order; use --mean arma for ARMA(P,Q)"));
  }
  const auto unused = [&](const char* lag) {
    return absl::InvalidArgumentError(
        absl::StrCat("variance '", variance, "' has no ", lag, " (", lag, " is for ",
                     std::string(lag) == "asym_lags" ? "gjr" : "garch and gjr", ")"));
  };
  const bool has_asym = spec.variance == VarianceKind::kGjr;
  const bool has_beta = spec.variance == VarianceKind::kGarch || has_asym;
  const bool has_alpha = spec.variance == VarianceKind::kArch || has_beta;
  if (lags.shock >= 0 && !has_alpha) {
    return absl::InvalidArgumentError(
        absl::StrCat("variance '", variance, "' has no shock_lags (it takes no lags)"));
  }
  if (lags.variance >= 0 && !has_beta) return unused("variance_lags");
  if (lags.asym >= 0 && !has_asym) return unused("asym_lags");
  spec.arch_order = has_alpha ? (lags.shock >= 0 ? lags.shock : 1) : 0;
  spec.garch_order = has_beta ? (lags.variance >= 0 ? lags.variance : 1) : 0;
  spec.asym_order = has_asym ? (lags.asym >= 0 ? lags.asym : spec.arch_order) : 0;
  if (auto s = spec.Validate(); !s.ok()) return s;
  return spec;
}

}  // namespace aftershock
