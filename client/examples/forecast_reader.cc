// An example back end: reads one stream's forecasts from bellwetherd and prints each
// answer with its error band, as a service would before showing them to people.
//
//   build/client/examples/forecast_reader 127.0.0.1:50151 grid england
//
// Predictions are advisory: Bellwether is not a safety system. Building-control and
// vehicle-charging decisions follow local codes and licensed practice.
#include <cstdio>

#include "absl/strings/str_format.h"
#include "client/bellwether_client.h"

int main(int argc, char** argv) {
  if (argc != 4) {
    std::fprintf(stderr, "usage: forecast_reader HOST:PORT POOL STREAM\n");
    return 1;
  }
  auto client = bellwether::Client::Connect(argv[1]);
  // Every call has a deadline; a slow or absent daemon is an error, not a hang.
  auto answers = client->Predict(argv[2], argv[3], absl::Seconds(2));
  if (!answers.ok()) {
    std::fprintf(stderr, "forecast_reader: %s\n", answers.status().ToString().c_str());
    return 2;
  }
  for (const bellwether::v1::Prediction& p : answers->predictions()) {
    // error_band is the verified RMSE: 0 until some predictions were checked against
    // what happened; a "learning" label means the answer is still moving.
    std::printf("%s\n", absl::StrFormat("%-24s %14.2f %s  +/- %.2f  (%s, %d verified, seq %d)",
                                        p.question(), p.value(), p.unit(), p.error_band(),
                                        p.label(), p.verified().count(), p.as_of_seq())
                            .c_str());
  }
  return 0;
}
