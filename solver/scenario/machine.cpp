#include "solver/scenario/machine.hpp"

#include <sys/resource.h>
#include <unistd.h>

#include <algorithm>
#include <fstream>
#include <sstream>
#include <string>

#include "solver/scenario/progress.hpp"

namespace trapwork {

namespace {
// A number of bytes from a cgroup file ("max" or unreadable: 0).
double cgroup_value(const std::string& path) {
  std::ifstream in(path);
  std::string text;
  if (!(in >> text) || text == "max") return 0;
  try {
    return std::stod(text);
  } catch (...) {
    return 0;
  }
}
// The cgroup v2 folder of this process ("0::/path" in /proc/self/cgroup), or "".
std::string cgroup_folder() {
  std::ifstream in("/proc/self/cgroup");
  for (std::string line; std::getline(in, line);)
    if (line.rfind("0::", 0) == 0) return "/sys/fs/cgroup" + line.substr(3);
  return "";
}
}  // namespace

double available_memory_bytes() {
  double available = 0;
  {
    std::ifstream in("/proc/meminfo");
    for (std::string line; std::getline(in, line);)
      if (line.rfind("MemAvailable:", 0) == 0) {
        std::istringstream fields(line.substr(13));
        double kib = 0;
        if (fields >> kib) available = kib * 1024;
      }
  }
  if (available <= 0) {
    const long pages = sysconf(_SC_AVPHYS_PAGES), page = sysconf(_SC_PAGESIZE);
    if (pages > 0 && page > 0) available = double(pages) * double(page);
  }
  const std::string folder = cgroup_folder();
  if (!folder.empty()) {
    const double max = cgroup_value(folder + "/memory.max");
    if (max > 0) {
      const double left = std::max(0.0, max - cgroup_value(folder + "/memory.current"));
      available = available > 0 ? std::min(available, left) : left;
    }
  }
  rlimit limit{};
  if (getrlimit(RLIMIT_AS, &limit) == 0 && limit.rlim_cur != RLIM_INFINITY) {
    const double as = double(limit.rlim_cur);
    available = available > 0 ? std::min(available, as) : as;
  }
  return available;
}

double estimated_seconds(double operations, int threads) { return operations / (5e9 * std::max(1, threads)); }

std::string cost_text(const CostEstimate& estimate, int threads) {
  return "estimated " + bytes_text(estimate.bytes) + " of memory, about " +
         ProgressBar::duration_text(estimated_seconds(estimate.operations, threads));
}

std::function<void(const CostEstimate&)> long_run_notice(std::function<void(const std::string&)> notice,
                                                         int threads) {
  if (!notice) return nullptr;
  return [notice = std::move(notice), threads](const CostEstimate& e) {
    if (estimated_seconds(e.operations, threads) > long_run_seconds)
      notice(cost_text(e, threads) + " (" + e.what + ")");
  };
}

}  // namespace trapwork
