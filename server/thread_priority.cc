#include "server/thread_priority.h"

#include <sys/resource.h>
#include <sys/syscall.h>
#include <unistd.h>

#include <cerrno>

namespace bellwether::server {

void LowerThisThreadsPriority(int nice) {
  if (nice <= 0) return;
  const pid_t tid = static_cast<pid_t>(syscall(SYS_gettid));
  errno = 0;
  const int current = getpriority(PRIO_PROCESS, static_cast<id_t>(tid));
  if (errno != 0) return;
  setpriority(PRIO_PROCESS, static_cast<id_t>(tid), current + nice);
}

}  // namespace bellwether::server
