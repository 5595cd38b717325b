// The daemon's HTTP routes: `/metrics` (Prometheus text), `/` (the status page, one
// self-contained HTML file built into the binary) and the page's JSON:
// `/api/overview` (bellwether.v1.StatusOverview) and `/api/progress?pool=P&stream=S`
// (bellwether.v1.ProgressResponse), both in the protobuf JSON mapping.
#ifndef BELLWETHER_SERVER_STATUS_HTTP_H_
#define BELLWETHER_SERVER_STATUS_HTTP_H_

#include <map>
#include <string>

#include "server/bellwether_service.h"
#include "server/daemon_metrics.h"
#include "server/http_server.h"
#include "server/pool_registry.h"

namespace bellwether::server {

// The advisory caution every user-facing surface shows.
inline constexpr char kCaution[] =
    "Predictions are advisory. Bellwether is not a safety system: building-control and "
    "vehicle-charging decisions follow local codes and licensed practice.";

// Routes over `registry`, `service` and `metrics` (all must outlive the server).
std::map<std::string, HttpServer::Handler> StatusRoutes(const PoolRegistry* registry,
                                                        const BellwetherService* service,
                                                        const DaemonMetrics* metrics,
                                                        const std::string& version);

}  // namespace bellwether::server

#endif  // BELLWETHER_SERVER_STATUS_HTTP_H_
