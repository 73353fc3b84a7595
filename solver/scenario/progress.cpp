#include "solver/scenario/progress.hpp"

#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace trapwork {

ProgressBar::ProgressBar(std::string label, std::size_t total, std::ostream& out, bool enabled,
                         Clock clock)
    : label_(std::move(label)),
      total_(std::max<std::size_t>(total, 1)),
      out_(out),
      enabled_(enabled),
      clock_(std::move(clock)) {
  if (enabled_) start_ = clock_();
}

ProgressBar::~ProgressBar() {
  try {
    finish();
  } catch (...) {
    // A failing stream must not throw out of a destructor; there is nothing left to report.
  }
}

bool ProgressBar::terminal_allows() { return ::isatty(STDERR_FILENO) == 1; }

double ProgressBar::steady_seconds() {
  return std::chrono::duration<double>(std::chrono::steady_clock::now().time_since_epoch())
      .count();
}

std::string ProgressBar::duration_text(double seconds) {
  const long s = std::lround(std::max(0.0, seconds));
  char text[32];
  if (s < 60)
    std::snprintf(text, sizeof text, "%lds", s);
  else if (s < 3600)
    std::snprintf(text, sizeof text, "%ldm%02lds", s / 60, s % 60);
  else
    std::snprintf(text, sizeof text, "%ldh%02ldm", s / 3600, (s % 3600) / 60);
  return text;
}

void ProgressBar::update(std::size_t done) {
  if (!enabled_) return;
  std::lock_guard<std::mutex> lock(mutex_);
  if (finished_) return;
  done_ = std::max(done_, std::min(done, total_));
  const double now = clock_();
  if (drawn_ && now - last_draw_ < redraw_interval) return;
  draw(now);
}

void ProgressBar::finish() {
  if (!enabled_) return;
  std::lock_guard<std::mutex> lock(mutex_);
  if (finished_) return;
  finished_ = true;
  draw(clock_());
  out_ << '\n' << std::flush;
}

void ProgressBar::restart(std::string label) {
  if (!enabled_) return;
  std::lock_guard<std::mutex> lock(mutex_);
  if (finished_) return;
  const double now = clock_();
  if (drawn_) {
    draw(now);
    out_ << '\n';
  }
  label_ = std::move(label);
  done_ = 0;
  start_ = now;
  drawn_ = false;
  line_length_ = 0;
  draw(now);
}

void ProgressBar::draw(double now) {
  const double fraction = static_cast<double>(done_) / static_cast<double>(total_);
  const double elapsed = now - start_;
  const int filled = static_cast<int>(std::floor(fraction * bar_width));
  std::string line = label_ + " [" + std::string(static_cast<std::size_t>(filled), '#') +
                     std::string(static_cast<std::size_t>(bar_width - filled), '-') + "] ";
  char percent[8];
  std::snprintf(percent, sizeof percent, "%3d%%", static_cast<int>(std::floor(100 * fraction)));
  line += percent;
  line += "  elapsed " + duration_text(elapsed);
  if (done_ > 0 && done_ < total_)
    line += "  left " + duration_text(elapsed * static_cast<double>(total_ - done_) /
                                      static_cast<double>(done_));
  else if (done_ == 0)
    line += "  left ?";
  const std::size_t length = line.size();
  if (line.size() < line_length_) line.append(line_length_ - line.size(), ' ');
  out_ << '\r' << line << std::flush;
  line_length_ = length;
  last_draw_ = now;
  drawn_ = true;
}

}  // namespace trapwork
