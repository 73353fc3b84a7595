#pragma once
// A one-line progress indicator for long runs of the command-line tool:
//
//   propagating [##############----------------]  47%  elapsed 12s  left 13s
//
// redrawn in place (carriage return) at most 10 times a second. The time left assumes a
// constant rate: left = elapsed * (total - done) / done. A disabled bar writes nothing at all;
// the caller enables it only when stderr is a terminal (terminal_allows()) and the user did
// not ask for quiet output.
//
// update() may be called from several worker threads at once (a mutex guards the state);
// `done` values that arrive out of order never move the bar backwards.
#include <chrono>
#include <cstddef>
#include <functional>
#include <mutex>
#include <ostream>
#include <string>

namespace trapwork {

class ProgressBar {
 public:
  // Seconds since an arbitrary fixed origin; must not decrease.
  using Clock = std::function<double()>;

  // total: work units of the whole run (> 0; 0 is treated as 1). clock: time source, by
  // default std::chrono::steady_clock; tests pass a fake one.
  ProgressBar(std::string label, std::size_t total, std::ostream& out, bool enabled,
              Clock clock = steady_seconds);
  ProgressBar(const ProgressBar&) = delete;
  ProgressBar& operator=(const ProgressBar&) = delete;
  // Ends the line if finish() was not called (for example when an exception unwinds).
  ~ProgressBar();

  // Reports `done` of `total` units finished (values above total count as total). Draws
  // when at least 0.1 s passed since the last drawing, and on the first call.
  void update(std::size_t done);
  // Draws the final state and ends the line with '\n'. Later calls and updates do nothing.
  void finish();
  // A new stage of the run whose progress starts again from 0 (for example the whole work
  // repeated with more levels): ends the current line as it stands and starts a fresh bar
  // with this label, its own elapsed time and estimate. Does nothing after finish().
  void restart(std::string label);

  // True when stderr is a terminal (isatty(STDERR_FILENO)).
  static bool terminal_allows();
  // Seconds of std::chrono::steady_clock.
  static double steady_seconds();

  // "7s", "1m23s", "2h05m": whole seconds below an hour, whole minutes above.
  static std::string duration_text(double seconds);

  // Shortest interval between two drawings, s.
  static constexpr double redraw_interval = 0.1;
  // Characters of the bar between the brackets.
  static constexpr int bar_width = 30;

 private:
  void draw(double now);  // with mutex_ held

  std::string label_;
  std::size_t total_;
  std::ostream& out_;
  bool enabled_;
  Clock clock_;
  std::mutex mutex_;
  double start_ = 0;
  double last_draw_ = 0;
  bool drawn_ = false;
  bool finished_ = false;
  std::size_t done_ = 0;
  std::size_t line_length_ = 0;  // length of the last line drawn, to blank its remains
};

}  // namespace trapwork
