#include "server/status_http.h"

#include <string>

#include "absl/strings/str_cat.h"
#include "google/protobuf/util/json_util.h"

namespace bellwether::server {

extern const char kStatusPageHtml[];  // status_page_html.cc, generated from status_page/

namespace {

HttpResponse Json(const google::protobuf::Message& m) {
  HttpResponse r;
  r.content_type = "application/json";
  google::protobuf::util::JsonPrintOptions options;
  options.add_whitespace = false;
  if (!google::protobuf::util::MessageToJsonString(m, &r.body, options).ok()) {
    r.status = 500;
    r.content_type = "text/plain; charset=utf-8";
    r.body = "cannot encode JSON\n";
  }
  return r;
}

HttpResponse Error(const absl::Status& s) {
  HttpResponse r;
  r.status = s.code() == absl::StatusCode::kNotFound ? 404 : 400;
  r.body = absl::StrCat(s.message(), "\n");
  return r;
}

}  // namespace

std::map<std::string, HttpServer::Handler> StatusRoutes(const PoolRegistry* registry,
                                                        const BellwetherService* service,
                                                        const DaemonMetrics* metrics,
                                                        const std::string& version) {
  std::map<std::string, HttpServer::Handler> routes;
  routes["/metrics"] = [metrics](const std::string&) {
    HttpResponse r;
    r.content_type = "text/plain; version=0.0.4; charset=utf-8";
    r.body = metrics->Scrape();
    return r;
  };
  routes["/"] = [](const std::string&) {
    HttpResponse r;
    r.content_type = "text/html; charset=utf-8";
    r.body = kStatusPageHtml;
    return r;
  };
  routes["/api/overview"] = [registry, version](const std::string&) {
    v1::StatusOverview o;
    o.set_version(version);
    o.set_caution(kCaution);
    for (const auto& worker : registry->All()) *o.add_pools() = PoolRegistry::Describe(*worker);
    return Json(o);
  };
  routes["/api/progress"] = [service](const std::string& query) {
    v1::ProgressRequest request;
    request.set_pool(QueryParam(query, "pool"));
    request.set_stream(QueryParam(query, "stream"));
    v1::ProgressResponse response;
    const absl::Status s = service->ReadProgress(request, &response);
    if (!s.ok()) return Error(s);
    return Json(response);
  };
  return routes;
}

}  // namespace bellwether::server
