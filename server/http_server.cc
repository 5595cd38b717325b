#include "server/http_server.h"

#include <cstring>
#include <utility>
#include <vector>

#include "absl/strings/str_cat.h"
#include "civetweb.h"

namespace bellwether::server {

std::string QueryParam(const std::string& query, const std::string& name) {
  std::vector<char> buf(query.size() + 1);
  const int n = mg_get_var(query.data(), query.size(), name.c_str(), buf.data(), buf.size());
  return n < 0 ? std::string() : std::string(buf.data(), static_cast<size_t>(n));
}

absl::StatusOr<std::unique_ptr<HttpServer>> HttpServer::Start(
    const std::string& host_port, std::map<std::string, Handler> routes, Authorizer authorize) {
  const size_t colon = host_port.rfind(':');
  if (colon == std::string::npos || colon + 1 >= host_port.size()) {
    return absl::InvalidArgumentError(absl::StrCat("--http ", host_port, ": expected HOST:PORT"));
  }
  std::unique_ptr<HttpServer> server(new HttpServer());
  server->routes_ = std::move(routes);
  server->authorize_ = std::move(authorize);
  mg_init_library(0);
  const char* options[] = {"listening_ports",    host_port.c_str(),
                           "num_threads",        "4",
                           "request_timeout_ms", "10000",
                           "enable_keep_alive",  "yes",
                           nullptr};
  mg_callbacks callbacks;
  std::memset(&callbacks, 0, sizeof(callbacks));
  callbacks.log_message = [](const mg_connection*, const char*) { return 1; };  // quiet
  server->ctx_ = mg_start(&callbacks, nullptr, options);
  if (server->ctx_ == nullptr) {
    return absl::UnavailableError(absl::StrCat("--http ", host_port, ": cannot listen"));
  }
  mg_server_port ports[4];
  const int n = mg_get_server_ports(server->ctx_, 4, ports);
  if (n < 1) return absl::UnavailableError(absl::StrCat("--http ", host_port, ": no port bound"));
  server->port_ = ports[0].port;
  mg_set_request_handler(server->ctx_, "/", &HttpServer::Dispatch, server.get());
  return server;
}

HttpServer::~HttpServer() {
  if (ctx_ != nullptr) mg_stop(ctx_);
}

int HttpServer::Dispatch(mg_connection* conn, void* self) {
  auto* server = static_cast<HttpServer*>(self);
  const mg_request_info* info = mg_get_request_info(conn);
  HttpResponse response;
  const std::string method = info->request_method != nullptr ? info->request_method : "";
  const std::string path = info->local_uri != nullptr ? info->local_uri : "/";
  const char* authorization = mg_get_header(conn, "Authorization");
  const bool denied = server->authorize_ != nullptr &&
                      !server->authorize_(authorization != nullptr ? authorization : "");
  if (denied) {
    response.status = 401;
    response.body = "authentication required\n";
  } else if (method != "GET" && method != "HEAD") {
    response.status = 405;
    response.body = "only GET and HEAD\n";
  } else {
    auto it = server->routes_.find(path);
    if (it == server->routes_.end()) {
      response.status = 404;
      response.body = absl::StrCat("no page at ", path, "\n");
    } else {
      response = it->second(info->query_string != nullptr ? info->query_string : "");
    }
  }
  const char* reason = response.status == 200   ? "OK"
                       : response.status == 400 ? "Bad Request"
                       : response.status == 401 ? "Unauthorized"
                       : response.status == 404 ? "Not Found"
                       : response.status == 405 ? "Method Not Allowed"
                       : response.status == 503 ? "Service Unavailable"
                                                : "Error";
  mg_printf(conn,
            "HTTP/1.1 %d %s\r\nContent-Type: %s\r\nContent-Length: %zu\r\n"
            "Cache-Control: no-store\r\nX-Content-Type-Options: nosniff\r\n%s\r\n",
            response.status, reason, response.content_type.c_str(), response.body.size(),
            denied ? "WWW-Authenticate: Basic realm=\"bellwether\", charset=\"UTF-8\"\r\n" : "");
  if (method != "HEAD") mg_write(conn, response.body.data(), response.body.size());
  return response.status;
}

}  // namespace bellwether::server
