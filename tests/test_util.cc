#include "tests/test_util.h"

#include <fcntl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "absl/strings/str_split.h"

namespace bellwether::testing {
namespace {

std::string ReadAll(const std::string& path) {
  std::ifstream in(path);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

}  // namespace

std::string ReadWholeFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

std::string MakeTempDir(const std::string& tag) {
  const char* base = std::getenv("TEST_TMPDIR");
  std::string tmpl = std::string(base ? base : "/tmp") + "/bw-" + tag + "-XXXXXX";
  std::vector<char> buf(tmpl.begin(), tmpl.end());
  buf.push_back('\0');
  const char* dir = mkdtemp(buf.data());
  return dir ? std::string(dir) : std::string();
}

CommandResult RunCommand(const std::vector<std::string>& argv) {
  CommandResult result;
  const std::string dir = MakeTempDir("cmd");
  const std::string out_path = dir + "/out", err_path = dir + "/err";
  const pid_t pid = fork();
  if (pid == 0) {
    const int out = open(out_path.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
    const int err = open(err_path.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
    dup2(out, 1);
    dup2(err, 2);
    std::vector<char*> args;
    for (const std::string& a : argv) args.push_back(const_cast<char*>(a.c_str()));
    args.push_back(nullptr);
    execv(args[0], args.data());
    _exit(127);
  }
  int status = 0;
  waitpid(pid, &status, 0);
  result.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  result.out = ReadAll(out_path);
  result.err = ReadAll(err_path);
  std::filesystem::remove_all(dir);
  return result;
}

std::vector<std::vector<double>> ReadNumericCsv(const std::string& path,
                                                std::vector<std::string>* header) {
  std::ifstream in(path);
  std::string line;
  std::vector<std::vector<double>> rows;
  if (!std::getline(in, line)) return rows;
  if (header != nullptr) *header = absl::StrSplit(line, ',');
  while (std::getline(in, line)) {
    std::vector<double> row;
    for (absl::string_view cell : absl::StrSplit(line, ',')) {
      row.push_back(std::strtod(std::string(cell).c_str(), nullptr));
    }
    rows.push_back(std::move(row));
  }
  return rows;
}

}  // namespace bellwether::testing
