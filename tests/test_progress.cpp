// ProgressBar: silence when disabled, the numbers it shows for a known rate, the redraw limit,
// the line ending, and concurrent updates.
#include <catch2/catch.hpp>

#include <algorithm>
#include <atomic>
#include <sstream>
#include <thread>
#include <vector>

#include "solver/scenario/progress.hpp"

using trapwork::ProgressBar;

namespace {
// A clock the test moves by hand.
struct FakeClock {
  double now = 0;
  ProgressBar::Clock function() {
    return [this] { return now; };
  }
};

std::size_t count(const std::string& s, char c) {
  return static_cast<std::size_t>(std::count(s.begin(), s.end(), c));
}

// The text of the last drawing: after the last '\r', without trailing blanks or newline.
std::string last_line(const std::string& s) {
  std::string line = s.substr(s.rfind('\r') + 1);
  while (!line.empty() && (line.back() == ' ' || line.back() == '\n')) line.pop_back();
  return line;
}
}  // namespace

TEST_CASE("a disabled progress bar writes nothing at all", "[progress]") {
  std::ostringstream out;
  FakeClock clock;
  {
    ProgressBar bar("propagating", 100, out, false, clock.function());
    for (std::size_t i = 0; i <= 100; ++i) {
      clock.now += 1;
      bar.update(i);
    }
    bar.finish();
  }
  CHECK(out.str().empty());
}

TEST_CASE("percentage, elapsed and time left for a constant rate", "[progress]") {
  std::ostringstream out;
  FakeClock clock;
  ProgressBar bar("propagating", 200, out, true, clock.function());
  clock.now = 10;
  bar.update(100);  // half done after 10 s at a constant rate: 10 s left
  const std::string line = last_line(out.str());
  CHECK(line.find("propagating [") == 0);
  CHECK(line.find(" 50%") != std::string::npos);
  CHECK(line.find("elapsed 10s") != std::string::npos);
  CHECK(line.find("left 10s") != std::string::npos);
  CHECK(line.find("[" + std::string(15, '#') + std::string(15, '-') + "]") != std::string::npos);

  clock.now = 30;
  bar.update(50);   // a late report from a slower thread does not move the bar back
  CHECK(last_line(out.str()).find(" 50%") != std::string::npos);
  clock.now = 40;
  bar.update(160);  // 80% after 40 s: 10 s left
  CHECK(last_line(out.str()).find(" 80%") != std::string::npos);
  CHECK(last_line(out.str()).find("left 10s") != std::string::npos);
  clock.now = 40 + 83;
  bar.update(180);  // 90% after 123 s: 123 * 20 / 180 = 13.7 s left
  CHECK(last_line(out.str()).find("elapsed 2m03s") != std::string::npos);
  CHECK(last_line(out.str()).find("left 14s") != std::string::npos);
}

TEST_CASE("the bar is redrawn at most every 0.1 s", "[progress]") {
  std::ostringstream out;
  FakeClock clock;
  ProgressBar bar("spectrum", 1000, out, true, clock.function());
  for (int i = 0; i < 10; ++i) {  // ten updates within 0.09 s: only the first draws
    clock.now = 0.01 * i;
    bar.update(static_cast<std::size_t>(i));
  }
  CHECK(count(out.str(), '\r') == 1);
  clock.now = 0.1;
  bar.update(10);
  CHECK(count(out.str(), '\r') == 2);
  CHECK(last_line(out.str()).find("  1%") != std::string::npos);
}

TEST_CASE("finish draws the final state and ends the line once", "[progress]") {
  std::ostringstream out;
  FakeClock clock;
  {
    ProgressBar bar("work", 4, out, true, clock.function());
    bar.update(1);
    clock.now = 0.05;
    bar.update(4);  // within the redraw interval: not drawn yet
    CHECK(out.str().find("100%") == std::string::npos);
    bar.finish();
    CHECK(out.str().back() == '\n');
    CHECK(last_line(out.str()).find("100%") != std::string::npos);
    bar.finish();
    bar.update(4);
  }  // the destructor does not end the line a second time
  CHECK(count(out.str(), '\n') == 1);
}

TEST_CASE("the destructor ends the line when finish was not reached", "[progress]") {
  std::ostringstream out;
  FakeClock clock;
  { ProgressBar bar("work", 10, out, true, clock.function()); bar.update(3); }
  CHECK(count(out.str(), '\n') == 1);
  CHECK(out.str().back() == '\n');
}

TEST_CASE("a shorter line blanks the rest of the previous one", "[progress]") {
  std::ostringstream out;
  FakeClock clock;
  ProgressBar bar("x", 100, out, true, clock.function());
  clock.now = 1;
  bar.update(1);      // long "left" text: 99 s -> "1m39s"
  const std::size_t first = out.str().size() - 1;  // without its '\r'
  clock.now = 2;
  bar.update(99);     // "left 0s" is shorter
  const std::string s = out.str();
  CHECK(s.size() - s.rfind('\r') - 1 >= first);
}

TEST_CASE("durations are written as seconds, minutes and hours", "[progress]") {
  CHECK(ProgressBar::duration_text(0) == "0s");
  CHECK(ProgressBar::duration_text(7.4) == "7s");
  CHECK(ProgressBar::duration_text(59.4) == "59s");
  CHECK(ProgressBar::duration_text(83) == "1m23s");
  CHECK(ProgressBar::duration_text(7500) == "2h05m");
  CHECK(ProgressBar::duration_text(-3) == "0s");
}

TEST_CASE("updates from several threads end in one consistent final line", "[progress]") {
  std::ostringstream out;
  const std::size_t per_thread = 2000;
  const int threads = 4;
  {
    ProgressBar bar("batch", per_thread * threads, out, true);  // real steady clock
    std::atomic<std::size_t> done{0};
    std::vector<std::thread> workers;
    for (int t = 0; t < threads; ++t)
      workers.emplace_back([&] {
        for (std::size_t i = 0; i < per_thread; ++i) bar.update(++done);
      });
    for (auto& w : workers) w.join();
    bar.finish();
  }
  const std::string s = out.str();
  CHECK(count(s, '\n') == 1);
  CHECK(last_line(s).find("100%") != std::string::npos);
  CHECK(last_line(s).find("[" + std::string(ProgressBar::bar_width, '#') + "]") !=
        std::string::npos);
}

TEST_CASE("restart ends the line as it stands and draws a new stage from 0 %", "[progress]") {
  std::ostringstream out;
  FakeClock clock;
  ProgressBar bar("propagating", 100, out, true, clock.function());
  clock.now = 5;
  bar.update(100);
  clock.now = 6;
  bar.restart("more levels");
  const std::string text = out.str();
  const std::size_t newline = text.rfind('\n');
  REQUIRE(newline != std::string::npos);
  CHECK(text.substr(0, newline).find("100%") != std::string::npos);  // the first stage, ended
  const std::string line = last_line(text);
  CHECK(line.find("more levels [") == 0);
  CHECK(line.find("  0%") != std::string::npos);
  CHECK(line.find("elapsed 0s") != std::string::npos);  // its own clock
  clock.now = 8;
  bar.update(50);
  CHECK(last_line(out.str()).find(" 50%") != std::string::npos);
  bar.finish();
  bar.restart("after finish");  // does nothing
  CHECK(out.str().find("after finish") == std::string::npos);
}
