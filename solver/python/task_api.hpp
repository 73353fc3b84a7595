#pragma once
// The task layer's names the module uses (TaskHooks, Interrupted). Interim: declared here until
// the task layer (solver/scenario/tasks.hpp) and trapwork::Interrupted (solver/errors.hpp) land.
#include <functional>
#include <stdexcept>
#include <string>

namespace trapwork {

struct TaskHooks {                                   // all optional
  std::function<void(double)> progress;              // share of the current stage done, 0..1
  std::function<void(const std::string&)> stage;     // a new stage starts (its name)
  std::function<void(const std::string&)> notice;    // a line for the user
};

// Thrown by the module's progress callback to stop a computation after Ctrl-C.
struct Interrupted : std::runtime_error {
  using std::runtime_error::runtime_error;
};

}  // namespace trapwork
