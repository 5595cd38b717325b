// The `bellwether` commands defined outside main.cc. Each returns an exit code.
#ifndef BELLWETHER_CLIENT_CLI_COMMANDS_H_
#define BELLWETHER_CLIENT_CLI_COMMANDS_H_

#include "client/cli/cli_common.h"

namespace bellwether::cli {

}  // namespace bellwether::cli

#endif  // BELLWETHER_CLIENT_CLI_COMMANDS_H_
