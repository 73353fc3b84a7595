#pragma once
// How the Python module runs a computation: on a worker thread, with the GIL released, while
// the calling thread waits in short intervals, checks for Ctrl-C and passes progress on.
//
// The computation receives TaskHooks whose progress and stage callbacks only store values in
// shared atomics (they run on worker threads, where Python must not be called) and throw
// Interrupted once the caller asked to stop. The calling thread, every poll_interval:
//   - calls PyErr_CheckSignals() with the GIL held: a pending KeyboardInterrupt (or any
//     exception a signal handler raised) sets the stop flag; the next progress call of the
//     computation throws Interrupted, which unwinds it (no files are written by a computation);
//   - calls the user's progress(stage, fraction), when given and something changed; an
//     exception it raises stops the computation the same way and is raised afterwards.
// The worker is always joined before the function returns, so no thread outlives the call.
// The sparse eigensolver calls hooks.interrupt at each step (SpectrumOptions::interrupt), which
// throws the same way; only the dense eigensolvers (grids of at most 1024 points, the Hermite
// basis: seconds at most) run to their end before the KeyboardInterrupt is raised.
#include <pybind11/pybind11.h>

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <exception>
#include <functional>
#include <mutex>
#include <optional>
#include <stdexcept>
#include <string>
#include <thread>
#include <vector>

#include "solver/errors.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork_python {

namespace py = pybind11;

// Interval between two checks for Ctrl-C and two progress calls (s): well under the second
// a notebook user waits for a KeyboardInterrupt.
inline constexpr auto poll_interval = std::chrono::milliseconds(50);

struct SharedProgress {
  std::atomic<bool> stop{false};
  std::atomic<double> fraction{0};
  std::mutex mutex;  // guards stage, stage_number and notices
  std::string stage;
  int stage_number = 0;
  std::vector<std::string> notices;
};

// Runs compute(hooks) as described above; returns its value or raises its exception (C++
// exceptions are translated by the module's translators), KeyboardInterrupt after Ctrl-C, or
// the exception of the progress callback. `progress` is None or a callable (stage, fraction);
// notices (cost estimates of long runs) go to `notice` when it is not None.
template <class R>
R run_interruptible(const std::function<R(const trapwork::TaskHooks&)>& compute, py::object progress,
                    py::object notice, const std::string& first_stage) {
  auto shared = std::make_shared<SharedProgress>();
  shared->stage = first_stage;
  trapwork::TaskHooks hooks;
  hooks.progress = [shared](double f) {
    shared->fraction.store(f, std::memory_order_relaxed);
    if (shared->stop.load()) throw trapwork::Interrupted("interrupted (KeyboardInterrupt)");
  };
  hooks.interrupt = [shared] {
    if (shared->stop.load()) throw trapwork::Interrupted("interrupted (KeyboardInterrupt)");
  };
  hooks.stage = [shared](const std::string& s) {
    {
      std::lock_guard lock(shared->mutex);
      shared->stage = s;
      ++shared->stage_number;
    }
    shared->fraction = 0;
    if (shared->stop.load()) throw trapwork::Interrupted("interrupted (KeyboardInterrupt)");
  };
  hooks.notice = [shared](const std::string& line) {
    std::lock_guard lock(shared->mutex);
    shared->notices.push_back(line);
  };

  std::optional<R> value;
  std::exception_ptr error;
  std::mutex done_mutex;
  std::condition_variable done_signal;
  bool done = false;
  std::thread worker([&] {
    try {
      value.emplace(compute(hooks));
    } catch (...) {
      error = std::current_exception();
    }
    std::lock_guard lock(done_mutex);
    done = true;
    done_signal.notify_all();
  });

  std::optional<py::error_already_set> python_error;  // KeyboardInterrupt or the callback's
  double shown_fraction = -1;
  int shown_stage = -1;
  auto report_progress = [&](bool final_call) {
    std::string stage;
    int number;
    std::vector<std::string> notices;
    {
      std::lock_guard lock(shared->mutex);
      stage = shared->stage;
      number = shared->stage_number;
      notices.swap(shared->notices);
    }
    if (!notice.is_none())
      for (const auto& n : notices) notice(n);
    if (progress.is_none()) return;
    const double f = final_call ? 1.0 : shared->fraction.load();
    if (number == shown_stage && f == shown_fraction) return;
    shown_stage = number;
    shown_fraction = f;
    progress(stage, f);
  };
  for (;;) {
    bool finished;
    {
      py::gil_scoped_release release;
      std::unique_lock lock(done_mutex);
      finished = done_signal.wait_for(lock, poll_interval, [&] { return done; });
    }
    if (finished) break;
    if (python_error) continue;  // stopping: wait for the worker to unwind
    try {
      if (PyErr_CheckSignals() != 0) throw py::error_already_set();
      report_progress(false);
    } catch (py::error_already_set& e) {
      python_error.emplace(std::move(e));
      shared->stop = true;
    }
  }
  worker.join();
  if (python_error) throw std::move(*python_error);
  if (error) std::rethrow_exception(error);
  if (PyErr_CheckSignals() != 0) throw py::error_already_set();  // Ctrl-C in the last interval
  report_progress(true);
  return std::move(*value);
}

}  // namespace trapwork_python
