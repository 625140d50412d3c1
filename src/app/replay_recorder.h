// ReplayRecorder: collects, during a replay, what the evaluation and the HTML
// report need per symbol (updates, model records, alerts, regime periods), and
// renders the report and the summary JSON afterwards. Off the hot path: it
// appends to vectors (a replay is a batch job).
//
// Thread-safety: ingest thread only (it is a BarObserver and ServiceListener).
#ifndef AFTERSHOCK_APP_REPLAY_RECORDER_H_
#define AFTERSHOCK_APP_REPLAY_RECORDER_H_

#include <cstdio>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "absl/status/status.h"
#include "aftershock/engine_services.h"
#include "aftershock/evaluation.h"
#include "aftershock/html_report.h"
#include "aftershock/ingest_core.h"

namespace aftershock::app {

class ReplayRecorder : public BarObserver, public ServiceListener {
 public:
  // `collect`: keep histories for the evaluation (else only --models is written).
  ReplayRecorder(const EngineConfig& config, bool collect) : config_(config), collect_(collect) {}
  ~ReplayRecorder() override;

  // Model records also go to this JSON Lines file.
  absl::Status OpenModelsFile(const std::string& path);
  absl::Status CloseModelsFile();

  void OnNewSymbol(IngestCore* core, int index, absl::string_view symbol) override;
  void OnBar(IngestCore* core, int index, const ClosedBar& bar, BarUpdate* update) override;
  void OnAlert(int index, const Alert& alert) override;
  void OnRefitRecord(int index, const RefitRecord& record) override;

  // Closes open regime periods at each symbol's last bar and records the
  // innovation law of each symbol's final model and, for a tracked symbol, its
  // tracked parameters (SymbolHistory::tracking). Call once after the replay.
  void Finish(const IngestCore& core);

  const std::vector<SymbolHistory>& histories() const { return histories_; }

  // Per-symbol evaluations (order of first appearance) and the overall line.
  nlohmann::json SummaryJson(const EvaluationOptions& options) const;
  absl::Status WriteReport(const std::string& path, const ReportRunInfo& run) const;
  // Every VaR exception of every symbol (VarExceptionsCsv) to `path`;
  // NotFound/Internal naming the path when it cannot be written.
  absl::Status WriteExceptionsCsv(const std::string& path, const EvaluationOptions& options) const;

 private:
  const EngineConfig config_;
  const bool collect_;
  std::FILE* models_ = nullptr;
  std::string models_path_;
  std::vector<SymbolHistory> histories_;
  std::vector<int64_t> regime_start_;  // per symbol: open regime start, -1 none
  std::vector<int> regime_dir_;
  std::vector<int64_t> instability_alerts_;  // per symbol: instability alerts published
};

}  // namespace aftershock::app

#endif  // AFTERSHOCK_APP_REPLAY_RECORDER_H_
