// MetricsHttpServer: GET /health and GET /metrics on the engine's io_context
// (Boost.Beast), so handlers run on the ingest thread and read the counters
// without locks. One request per connection (Connection: close); other paths
// are 404, other methods 405. GET /health answers 200 with the health JSON,
// or 503 (Service Unavailable) with the same JSON when the engine is degraded
// (engine_metrics.h CheckHealth), so a load balancer or probe sees it. Private
// to the engine.
//
// Thread-safety: everything runs on the io_context's thread.
#ifndef AFTERSHOCK_STREAMING_METRICS_HTTP_H_
#define AFTERSHOCK_STREAMING_METRICS_HTTP_H_

#include <boost/asio/io_context.hpp>
#include <functional>
#include <memory>
#include <string>

#include "absl/status/statusor.h"
#include "aftershock/engine_metrics.h"

namespace aftershock {

class MetricsHttpServer {
 public:
  using Render = std::function<std::string()>;
  using HealthRender = std::function<HealthStatus()>;
  // Binds host:port ("127.0.0.1:7310"; port 0 picks a free one) and starts
  // accepting. Error naming the endpoint when it cannot bind.
  static absl::StatusOr<std::unique_ptr<MetricsHttpServer>> Start(boost::asio::io_context* io,
                                                                  const std::string& endpoint,
                                                                  HealthRender health,
                                                                  Render metrics);
  ~MetricsHttpServer();
  std::string endpoint() const;  // "127.0.0.1:40123"
  void Close();

  struct Impl;

 private:
  explicit MetricsHttpServer(std::shared_ptr<Impl> impl) : impl_(std::move(impl)) {}
  std::shared_ptr<Impl> impl_;
};

}  // namespace aftershock

#endif  // AFTERSHOCK_STREAMING_METRICS_HTTP_H_
