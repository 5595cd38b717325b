// A small HTTP/1.1 server (civetweb) for the daemon's read-only endpoints: /metrics, the
// status page and its JSON. GET and HEAD only; each route is an exact path.
#ifndef BELLWETHER_SERVER_HTTP_SERVER_H_
#define BELLWETHER_SERVER_HTTP_SERVER_H_

#include <functional>
#include <map>
#include <memory>
#include <string>

#include "absl/status/statusor.h"

struct mg_context;
struct mg_connection;

namespace bellwether::server {

struct HttpResponse {
  int status = 200;
  std::string content_type = "text/plain; charset=utf-8";
  std::string body;
};

class HttpServer {
 public:
  // Receives the query string (without '?'), and returns the response. Runs on one of
  // the server's threads; must be thread-safe.
  using Handler = std::function<HttpResponse(const std::string& query)>;
  // Receives the request's Authorization header (empty if none); false answers 401 with
  // a Basic challenge. Must be thread-safe.
  using Authorizer = std::function<bool(const std::string& authorization)>;

  // Listens on `host_port` ("127.0.0.1:0" picks a free port). INVALID_ARGUMENT for a
  // malformed address, UNAVAILABLE if it cannot listen. With `authorize`, every request
  // must pass it.
  static absl::StatusOr<std::unique_ptr<HttpServer>> Start(const std::string& host_port,
                                                           std::map<std::string, Handler> routes,
                                                           Authorizer authorize = nullptr);
  // Stops listening and waits for requests in progress.
  ~HttpServer();

  HttpServer(const HttpServer&) = delete;
  HttpServer& operator=(const HttpServer&) = delete;

  // The bound port.
  int port() const { return port_; }

 private:
  HttpServer() = default;
  static int Dispatch(mg_connection* conn, void* self);

  std::map<std::string, Handler> routes_;
  Authorizer authorize_;
  mg_context* ctx_ = nullptr;
  int port_ = 0;
};

// The value of `name` in a URL query string ("a=1&b=x%20y"), URL-decoded; empty if absent.
std::string QueryParam(const std::string& query, const std::string& name);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_HTTP_SERVER_H_
