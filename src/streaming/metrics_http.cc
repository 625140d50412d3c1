#include "streaming/metrics_http.h"

#include <boost/asio/ip/tcp.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <charconv>

#include "absl/strings/str_cat.h"

namespace aftershock {

namespace asio = boost::asio;
namespace beast = boost::beast;
namespace http = boost::beast::http;
using tcp = boost::asio::ip::tcp;

struct MetricsHttpServer::Impl : std::enable_shared_from_this<MetricsHttpServer::Impl> {
  explicit Impl(asio::io_context* io) : acceptor(*io) {}
  tcp::acceptor acceptor;
  HealthRender health;
  Render metrics;
  bool closed = false;

  void Accept() {
    auto self = shared_from_this();
    acceptor.async_accept([self](const boost::system::error_code& ec, tcp::socket socket) {
      if (self->closed) return;
      if (!ec) Serve(self, std::make_shared<tcp::socket>(std::move(socket)));
      self->Accept();
    });
  }

  static void Serve(std::shared_ptr<Impl> self, std::shared_ptr<tcp::socket> socket) {
    auto buffer = std::make_shared<beast::flat_buffer>(8192);
    auto req = std::make_shared<http::request<http::string_body>>();
    http::async_read(
        *socket, *buffer, *req,
        [self, socket, buffer, req](const boost::system::error_code& ec, size_t) {
          if (ec) return;
          auto res = std::make_shared<http::response<http::string_body>>();
          res->version(req->version());
          res->keep_alive(false);
          const auto target = req->target();
          if (req->method() != http::verb::get) {
            res->result(http::status::method_not_allowed);
            res->set(http::field::allow, "GET");
            res->body() = "only GET\n";
          } else if (target == "/health") {
            HealthStatus h = self->health();
            res->result(h.degraded ? http::status::service_unavailable : http::status::ok);
            res->set(http::field::content_type, "application/json");
            res->body() = std::move(h.json);
          } else if (target == "/metrics") {
            res->result(http::status::ok);
            res->set(http::field::content_type, "text/plain; version=0.0.4");
            res->body() = self->metrics();
          } else {
            res->result(http::status::not_found);
            res->body() = "paths: /health /metrics\n";
          }
          res->prepare_payload();
          http::async_write(*socket, *res, [socket, res](const boost::system::error_code&, size_t) {
            boost::system::error_code ignored;
            socket->shutdown(tcp::socket::shutdown_send, ignored);
          });
        });
  }
};

absl::StatusOr<std::unique_ptr<MetricsHttpServer>> MetricsHttpServer::Start(
    asio::io_context* io, const std::string& endpoint, HealthRender health, Render metrics) {
  const size_t colon = endpoint.rfind(':');
  int port = -1;
  if (colon != std::string::npos) {
    std::from_chars(endpoint.data() + colon + 1, endpoint.data() + endpoint.size(), port);
  }
  if (colon == std::string::npos || port < 0 || port > 65535) {
    return absl::InvalidArgumentError(
        absl::StrCat("[http] endpoint: expected host:port, got \"", endpoint, "\""));
  }
  boost::system::error_code ec;
  const auto addr = asio::ip::make_address(endpoint.substr(0, colon), ec);
  if (ec) {
    return absl::InvalidArgumentError(
        absl::StrCat("[http] endpoint: bad address in \"", endpoint, "\": ", ec.message()));
  }
  auto impl = std::make_shared<Impl>(io);
  impl->health = std::move(health);
  impl->metrics = std::move(metrics);
  const tcp::endpoint ep(addr, static_cast<unsigned short>(port));
  impl->acceptor.open(ep.protocol(), ec);
  if (!ec) impl->acceptor.set_option(asio::socket_base::reuse_address(true), ec);
  if (!ec) impl->acceptor.bind(ep, ec);
  if (!ec) impl->acceptor.listen(asio::socket_base::max_listen_connections, ec);
  if (ec) {
    return absl::UnavailableError(
        absl::StrCat("[http] cannot bind \"", endpoint, "\": ", ec.message()));
  }
  impl->Accept();
  return std::unique_ptr<MetricsHttpServer>(new MetricsHttpServer(std::move(impl)));
}

MetricsHttpServer::~MetricsHttpServer() { Close(); }

void MetricsHttpServer::Close() {
  if (impl_->closed) return;
  impl_->closed = true;
  boost::system::error_code ignored;
  impl_->acceptor.close(ignored);
}

std::string MetricsHttpServer::endpoint() const {
  boost::system::error_code ec;
  const auto ep = impl_->acceptor.local_endpoint(ec);
  if (ec) return "";
  return absl::StrCat(ep.address().to_string(), ":", ep.port());
}

}  // namespace aftershock
