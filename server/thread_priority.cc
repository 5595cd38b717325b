#include "server/thread_priority.h"

#include <pthread.h>
#include <sched.h>
#include <sys/resource.h>
#include <sys/syscall.h>
#include <unistd.h>

#include <cerrno>

#include "absl/strings/str_cat.h"

namespace bellwether::server {
namespace {

constexpr int kLowNice = 10;

}  // namespace

bool AbslParseFlag(absl::string_view text, BackgroundPriority* priority, std::string* error) {
  if (text == "idle") {
    *priority = BackgroundPriority::kIdle;
  } else if (text == "low") {
    *priority = BackgroundPriority::kLow;
  } else if (text == "normal") {
    *priority = BackgroundPriority::kNormal;
  } else {
    *error = absl::StrCat("'", text, "' is not a priority (idle, low or normal)");
    return false;
  }
  return true;
}

std::string AbslUnparseFlag(BackgroundPriority priority) {
  switch (priority) {
    case BackgroundPriority::kIdle:
      return "idle";
    case BackgroundPriority::kLow:
      return "low";
    case BackgroundPriority::kNormal:
      return "normal";
  }
  return "normal";
}

void NameThisThread(const char* name) {
  // The kernel keeps 15 characters and refuses a longer name outright.
  const std::string truncated(absl::string_view(name).substr(0, 15));
  pthread_setname_np(pthread_self(), truncated.c_str());
}

void SetThisThreadsPriority(BackgroundPriority priority) {
  if (priority == BackgroundPriority::kNormal) return;
  const pid_t tid = static_cast<pid_t>(syscall(SYS_gettid));
  // The nice value matters under SCHED_IDLE only if the thread falls back to normal
  // scheduling (the call below refused), so it is raised in both cases.
  errno = 0;
  const int current = getpriority(PRIO_PROCESS, static_cast<id_t>(tid));
  if (errno == 0) setpriority(PRIO_PROCESS, static_cast<id_t>(tid), current + kLowNice);
  if (priority == BackgroundPriority::kIdle) {
    sched_param param{};
    sched_setscheduler(tid, SCHED_IDLE, &param);  // per thread on Linux
  }
}

}  // namespace bellwether::server
