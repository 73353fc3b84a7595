#pragma once
// What the machine offers a run, read by the tool and passed to the library as limits
// (the library reads nothing of its surroundings): memory available, and a rough time for an
// operation count.
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

// Connects a work request to a progress bar: fractions to update(), a new stage (the work
// repeated with more levels) to restart(), and, when `notes` is not null, the estimate of a run
// longer than long_run_seconds to `notes` before its propagation starts. Sets the memory limit
// to available_memory_bytes() unless one is set.
void watch_work(WorkRequest& request, ProgressBar& bar, std::ostream* notes);

}  // namespace trapwork
