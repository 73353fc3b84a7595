#pragma once
// What the machine offers a run, read by the tool and passed to the library as limits
// (the library reads nothing of its surroundings): memory available, and a rough time for an
// operation count.
#include <functional>
#include <ostream>
#include <string>

#include "solver/cost.hpp"
#include "solver/scenario/progress.hpp"
#include "solver/work.hpp"

namespace trapwork {

// Memory this process may still use, in bytes: MemAvailable of /proc/meminfo (or, where that
// is missing, sysconf's available physical pages), lowered to a cgroup v2 limit
// (memory.max - memory.current of the process's cgroup) and to RLIMIT_AS when those are set.
// 0 when nothing can be read (then no limit is applied).
double available_memory_bytes();

// Seconds a count of floating-point operations takes here, roughly: at 5e9 operations per
// second and thread (measured on the 2-core development machine: the built-in scenario's
// estimated 1.7e10 operations ran in 1.2 s on 2 threads, 1e8 `plan` draws in 5.3 s; an
// order-of-magnitude figure, not a promise).
double estimated_seconds(double operations, int threads = 1);

// "estimated 3.2 GB of memory, about 2 min": an estimate for people.
std::string cost_text(const CostEstimate& estimate, int threads = 1);

// Runs estimated to take longer than this (s) print their estimate before they start and in
// their report.
constexpr double long_run_seconds = 30;

// A cost-estimate callback (WorkRequest::on_estimate, SpectrumOptions::on_estimate) that passes
// the estimate of a computation longer than long_run_seconds on `threads` to `notice` as
// "estimated 20 MB of memory, about 2m05s (what)"; null when `notice` is.
std::function<void(const CostEstimate&)> long_run_notice(std::function<void(const std::string&)> notice,
                                                         int threads = 1);

}  // namespace trapwork
