// The `bellwether` commands defined outside main.cc. Each returns an exit code.
#ifndef BELLWETHER_CLIENT_CLI_COMMANDS_H_
#define BELLWETHER_CLIENT_CLI_COMMANDS_H_

#include "client/cli/cli_common.h"

namespace google::protobuf {
class Message;
}  // namespace google::protobuf

namespace bellwether::cli {

// Read commands (cmd_read.cc): each handles its own --help.
int Watch(const Args& args);     // watch --pool P --stream S [--questions A,B] ...
int Progress(const Args& args);  // progress --pool P --stream S
int Health(const Args& args);    // health: grpc.health.v1 Check; exit 0 iff SERVING
// --output text|json (cmd_read.cc): sets *json; returns kExitOk or a usage error's code.
int CheckOutput(const Args& args, bool* json);
// Prints `message` as one line of protobuf JSON (lowerCamelCase names, zeros included).
void PrintJsonLine(const google::protobuf::Message& message);

// stream (cmd_stream.cc): a CSV file's rows as frames; --rate, --follow; own --help.
int Stream(const Args& args);

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_COMMANDS_H_
