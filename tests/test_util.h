// Helpers shared by tests that run the real binaries.
#ifndef BELLWETHER_TESTS_TEST_UTIL_H_
#define BELLWETHER_TESTS_TEST_UTIL_H_

#include <string>
#include <vector>

namespace bellwether::testing {

// Result of running a command: exit code and what it printed (stdout and stderr).
struct CommandResult {
  int exit_code = -1;
  std::string out;
  std::string err;
};

// Runs `argv` (argv[0] a path) to completion, capturing its output.
CommandResult RunCommand(const std::vector<std::string>& argv);

// A file's whole contents ("" if it cannot be read).
std::string ReadWholeFile(const std::string& path);

// A fresh empty directory under the test's temporary directory.
std::string MakeTempDir(const std::string& tag);

// Reads a CSV file of numbers with a header into rows of doubles; the header is
// returned in `header` (if non-null).
std::vector<std::vector<double>> ReadNumericCsv(const std::string& path,
                                                std::vector<std::string>* header = nullptr);

}  // namespace bellwether::testing

#endif  // BELLWETHER_TESTS_TEST_UTIL_H_
