#pragma once
// Error types shared by the library and the tool.
#include <stdexcept>
#include <string>

namespace trapwork {

// Bad user input: a scenario value, a unit, a formula, a data row. Carries where it was
// found so the tool can print "file:line:column: key = found: expected". The library
// fills what it knows (key, found, expected); the scenario reader adds file and position.
struct InputError : std::runtime_error {
  std::string file, key, found, expected, suggestion;
  int line = 0, column = 0;
  InputError(std::string key_, std::string found_, std::string expected_,
             std::string suggestion_ = {}, std::string file_ = {}, int line_ = 0, int column_ = 0);
  static std::string format(const std::string& file, int line, int column, const std::string& key,
                            const std::string& found, const std::string& expected,
                            const std::string& suggestion);
};

// Valid input that is physically or numerically unusable: a potential that does not confine
// the states asked for, a grid that cannot hold them. The message says what to change.
struct PhysicsError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

// A run stopped on request: a front end throws it from a progress hook (the Python module on
// Ctrl-C); the tasks (solver/scenario/tasks.hpp) let it through and leave no thread running.
struct Interrupted : std::runtime_error {
  using std::runtime_error::runtime_error;
};

// Programmer error (mismatched sizes, unsorted input passed inwards).
struct ContractViolation : std::logic_error {
  using std::logic_error::logic_error;
};

}  // namespace trapwork

#define TRAPWORK_EXPECT(cond, msg)                                                       \
  do {                                                                                   \
    if (!(cond)) throw ::trapwork::ContractViolation(std::string(__FILE__) + ":" +        \
                                                     std::to_string(__LINE__) + ": " + (msg)); \
  } while (0)
