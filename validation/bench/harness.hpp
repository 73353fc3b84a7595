#pragma once
// A small benchmark harness (benchmarks only, not tests): each case runs in a child process
// (fork), so that its peak memory (ru_maxrss of the child) and its CPU time (user + system of
// the child) are its own; the child reports its wall time and a few numbers through a pipe.
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cmath>
#include <algorithm>
#include <cstdio>
#include <exception>
#include <functional>
#include <utility>
#include <vector>

namespace trapwork_bench {

struct Measurement {
  double wall_s = NAN, cpu_s = NAN, peak_mib = NAN;
  std::vector<double> values;  // what the job returned besides its time
  bool ok = false;
};

// What a job returns: the wall and CPU time of the part worth timing (set-up excluded) and
// any numbers the parent needs (operation counts, a check value).
struct JobResult {
  double wall_s = NAN, cpu_s = NAN;
  std::vector<double> values;
};

// CPU time (user + system) of this process, all its threads.
inline double process_cpu_s() {
  rusage u{};
  getrusage(RUSAGE_SELF, &u);
  return double(u.ru_utime.tv_sec + u.ru_stime.tv_sec) + 1e-6 * double(u.ru_utime.tv_usec + u.ru_stime.tv_usec);
}

// Wall and CPU clocks started at construction; result() reads both.
class Stopwatch {
 public:
  Stopwatch() : wall_(std::chrono::steady_clock::now()), cpu_(process_cpu_s()) {}
  JobResult result(std::vector<double> values = {}) const {
    return {std::chrono::duration<double>(std::chrono::steady_clock::now() - wall_).count(), process_cpu_s() - cpu_,
            std::move(values)};
  }

 private:
  std::chrono::steady_clock::time_point wall_;
  double cpu_;
};

// At most this many values are passed back from a child.
constexpr std::size_t max_values = 32;

// Runs job() in a child process. Peak memory is the child's whole life (set-up included);
// wall and CPU time are what the job measured; at most max_values values are passed back.
inline Measurement in_child(const std::function<JobResult()>& job) {
  int fd[2];
  if (pipe(fd) != 0) return {};
  std::fflush(stdout);
  const pid_t child = fork();
  if (child == 0) {
    close(fd[0]);
    double out[3 + max_values] = {};
    try {
      const JobResult r = job();
      out[0] = r.wall_s;
      out[1] = r.cpu_s;
      out[2] = double(std::min(r.values.size(), max_values));
      for (std::size_t i = 0; i < r.values.size() && i < max_values; ++i) out[3 + i] = r.values[i];
    } catch (const std::exception& e) {
      std::fprintf(stderr, "benchmark case failed: %s\n", e.what());
      _exit(2);
    }
    if (write(fd[1], out, sizeof out) != sizeof out) _exit(1);
    _exit(0);
  }
  close(fd[1]);
  Measurement m;
  double in[3 + max_values] = {};
  m.ok = read(fd[0], in, sizeof in) == sizeof in;
  close(fd[0]);
  int status = 0;
  rusage usage{};
  wait4(child, &status, 0, &usage);
  m.ok = m.ok && WIFEXITED(status) && WEXITSTATUS(status) == 0;
  m.peak_mib = double(usage.ru_maxrss) / 1024.0;  // KiB -> MiB
  if (m.ok) {
    m.wall_s = in[0];
    m.cpu_s = in[1];
    for (int i = 0; i < int(in[2]); ++i) m.values.push_back(in[3 + i]);
  }
  return m;
}

}  // namespace trapwork_bench
