// trapwork sweep --resume: a sweep killed mid-way (SIGKILL, no chance to clean up) and then
// resumed gives the same sweep.csv as an uninterrupted run, with no point lost or repeated and
// the points finished before the kill kept bit for bit; a folder from another scenario is
// refused.
//
// Points computed in different processes agree to rounding, not bit for bit: FFTW_MEASURE may
// pick another transform algorithm in each process. They are compared to 1e-12 relative, the
// rounding budget of tests/test_threads.cpp (steps * a few eps).
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "scratch_files.hpp"
#include "solver/scenario/output.hpp"

namespace fs = std::filesystem;
using trapwork_test::read_all;

namespace {
const fs::path binary = fs::path(TRAPWORK_BINARY_DIR) / "trapwork";

// A harmonic 40 u ion at 1 MHz moved by 30 nm, nearly cold, over six durations: about a
// second per point, one point at a time, so the kill lands between points. No duration is a
// whole number of trap periods, where <W> = 0 and the skewness is rounding noise.
const std::string sweep_scenario = trapwork_test::harmonic_move_text + R"([work]
time_step_check = false
[sweep]
parameter = "protocol.duration"
values = ["1.5 us", "0.7 us", "1.3 us", "1.7 us", "0.4 us", "1.2 us"]
)";
constexpr std::size_t sweep_points = 6;

// Runs trapwork in `dir` with stdout and stderr to files; returns the exit status.
int run(const fs::path& dir, const std::string& arguments) {
  const std::string command = "cd '" + dir.string() + "' && '" + binary.string() + "' " + arguments +
                              " > stdout.txt 2> stderr.txt";
  const int status = std::system(command.c_str());
  REQUIRE(WIFEXITED(status));
  return WEXITSTATUS(status);
}

// Finished points recorded in sweep-points.txt (lines after the fingerprint line).
std::size_t points_recorded(const fs::path& file) {
  std::ifstream in(file);
  std::size_t lines = 0;
  for (std::string line; std::getline(in, line);) lines += !line.empty();
  return lines > 0 ? lines - 1 : 0;
}

// The numbers of each data row of a trapwork CSV.

// The names line and the comment lines of a trapwork CSV.
std::string head_of(const std::string& csv) {
  std::string head;
  std::istringstream in(csv);
  std::string line;
  for (int i = 0; std::getline(in, line); ++i)
    if (i == 0 || (!line.empty() && line[0] == '#')) head += line + "\n";
  return head;
}

// Same names and comments, the same swept values in the same order (no point lost or
// repeated), every other number within the rounding budget of the file comment.
void check_same_sweep(const std::string& a, const std::string& b) {
  CHECK(head_of(a) == head_of(b));
  const auto x = trapwork_test::csv_rows(a), y = trapwork_test::csv_rows(b);
  REQUIRE(x.size() == y.size());
  const std::size_t crooks = trapwork_test::csv_column_index(a, "crooks_ratio_error");
  for (std::size_t r = 0; r < x.size(); ++r) {
    REQUIRE(x[r].size() == y[r].size());
    CHECK(x[r][0] == y[r][0]);
    for (std::size_t c = 1; c < x[r].size(); ++c) {
      INFO("row " << r << ", column " << c << ": " << x[r][c] << " vs " << y[r][c]);
      if (c ==
          crooks) {  // crooks_ratio_error: rounding of the smallest probabilities (tests/test_threads.cpp)
        CHECK(std::abs(x[r][c]) < 1e-9);
        CHECK(std::abs(y[r][c]) < 1e-9);
      } else if (std::isnan(x[r][c]) || std::isnan(y[r][c]))
        CHECK((std::isnan(x[r][c]) && std::isnan(y[r][c])));
      else
        CHECK(std::abs(x[r][c] - y[r][c]) <= 1e-12 * std::max(1.0, std::abs(y[r][c])));
    }
  }
}

// The lines of a file, each once.
std::vector<std::string> lines_of(const fs::path& file) {
  std::vector<std::string> lines;
  std::ifstream in(file);
  for (std::string line; std::getline(in, line);) lines.push_back(line);
  return lines;
}

// Data rows of a trapwork CSV (not the names line, not '#' comments).
std::vector<std::string> data_rows(const std::string& csv) {
  std::vector<std::string> rows;
  std::istringstream in(csv);
  std::string line;
  std::getline(in, line);
  while (std::getline(in, line))
    if (!line.empty() && line[0] != '#') rows.push_back(line);
  return rows;
}
}  // namespace

TEST_CASE("a sweep killed after its first point and resumed equals an uninterrupted sweep", "[sweep][resume]") {
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-resume", "kill");
  std::ofstream(dir / "sweep.toml") << sweep_scenario;

  REQUIRE(run(dir, "sweep sweep.toml -o whole --jobs 1 --quiet") == 0);
  const std::string whole = read_all(dir / "whole" / "sweep.csv");
  REQUIRE(data_rows(whole).size() == sweep_points);

  // The same sweep as a child process, killed as soon as a point is on disk.
  const pid_t child = fork();
  REQUIRE(child >= 0);
  if (child == 0) {
    if (chdir(dir.c_str()) != 0) _exit(127);
    const char* devnull = "/dev/null";
    (void)!freopen(devnull, "w", stdout);
    execl(binary.c_str(), "trapwork", "sweep", "sweep.toml", "-o", "cut", "--jobs", "1", "--quiet", nullptr);
    _exit(127);
  }
  const fs::path points = dir / "cut" / "sweep-points.txt";
  int status = 0;
  bool exited = false;
  for (int polls = 0; polls < 6000 && points_recorded(points) < 1; ++polls) {  // at most 10 min
    if (waitpid(child, &status, WNOHANG) == child) {
      exited = true;
      break;
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
  }
  REQUIRE_FALSE(exited);  // still running when its first point was written
  REQUIRE(kill(child, SIGKILL) == 0);
  REQUIRE(waitpid(child, &status, 0) == child);
  REQUIRE(WIFSIGNALED(status));
  const std::size_t before = points_recorded(points);
  INFO("points finished before the kill: " << before);
  REQUIRE(before >= 1);
  REQUIRE(before < sweep_points);  // the kill really cut the sweep short
  REQUIRE(data_rows(read_all(dir / "cut" / "sweep.csv")).size() <= before);
  const std::vector<std::string> kept = lines_of(points);
  // Only temporary files may be left, and the folder's lock file (.trapwork-lock, output.hpp): its
  // flock died with the process, so the resumed run below is not blocked by it.
  for (const auto& entry : fs::directory_iterator(dir / "cut"))
    if (entry.path().filename().string().find(".tmp-") == std::string::npos)
      CHECK((entry.path().filename() == "sweep.csv" || entry.path().filename() == "sweep-points.txt" ||
             entry.path().filename() == ".trapwork-lock"));

  REQUIRE(run(dir, "sweep sweep.toml -o cut --jobs 1 --resume") == 0);
  const std::string report = read_all(dir / "stdout.txt");
  CHECK_THAT(report, Catch::Contains("resumed") &&
                         Catch::Contains(std::to_string(before) + " of " + std::to_string(sweep_points) + " points") &&
                         Catch::Contains(std::to_string(sweep_points - before) + " computed now"));
  check_same_sweep(read_all(dir / "cut" / "sweep.csv"), whole);
  CHECK(points_recorded(points) == sweep_points);
  // The points finished before the kill were kept, not computed again: their records are
  // unchanged to the last digit.
  const std::vector<std::string> after = lines_of(points);
  for (const auto& line : kept) CHECK(std::count(after.begin(), after.end(), line) == 1);
  const std::string resumed = read_all(dir / "cut" / "sweep.csv");

  // Resuming a finished sweep computes nothing and leaves the same file.
  REQUIRE(run(dir, "sweep sweep.toml -o cut --jobs 2 --resume") == 0);
  CHECK_THAT(read_all(dir / "stdout.txt"), Catch::Contains("0 computed now"));
  CHECK(read_all(dir / "cut" / "sweep.csv") == resumed);  // nothing recomputed: the same bytes
}

TEST_CASE("--resume refuses the points of another scenario or a damaged record", "[sweep][resume]") {
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-resume", "other");
  const std::string few = sweep_scenario.substr(0, sweep_scenario.find("values =")) + "values = [\"1.3 us\", \"0.5 us\"]\n";
  std::ofstream(dir / "a.toml") << few;
  REQUIRE(run(dir, "sweep a.toml -o out --jobs 1 --quiet") == 0);
  const std::string first = read_all(dir / "out" / "sweep.csv");

  // Another list of values is another sweep: refused, and the folder is left as it was.
  std::ofstream(dir / "b.toml") << few.substr(0, few.find("values =")) + "values = [\"1.3 us\", \"0.6 us\"]\n";
  CHECK(run(dir, "sweep b.toml -o out --jobs 1 --resume") == 2);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("trapwork: error: out/sweep-points.txt:1:") &&
                                               Catch::Contains("another scenario") &&
                                               Catch::Contains("without --resume"));
  CHECK(read_all(dir / "out" / "sweep.csv") == first);

  // A record whose value does not belong to its index: refused at its line.
  std::string record = read_all(dir / "out" / "sweep-points.txt");
  const auto second_line = record.find('\n') + 1;
  record.replace(second_line, record.find(' ', second_line) - second_line, "1");  // index 0 -> 1
  const auto third_line = record.find('\n', second_line) + 1;
  record = record.substr(0, third_line);  // keep one point only
  std::ofstream(dir / "out" / "sweep-points.txt") << record;
  CHECK(run(dir, "sweep a.toml -o out --jobs 1 --resume") == 2);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("out/sweep-points.txt:2:") &&
                                               Catch::Contains("a finished sweep point"));

  // Without a record, --resume starts from the first point.
  fs::remove_all(dir / "out");
  REQUIRE(run(dir, "sweep a.toml -o out --jobs 1 --resume") == 0);
  CHECK_THAT(read_all(dir / "stdout.txt"), Catch::Contains("0 of 2 points") && Catch::Contains("2 computed now"));
  check_same_sweep(read_all(dir / "out" / "sweep.csv"), first);
}

TEST_CASE("issue 14: a failing sweep point is recorded as failed, the sweep goes on, --resume keeps it",
          "[sweep][resume][issue14]") {
  // A polynomial trap swept through frequency 0 (no quartic): V = 0 there does not confine,
  // so that point cannot be computed; the others can.
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-resume", "failed");
  std::string text = sweep_scenario.substr(0, sweep_scenario.find("[sweep]"));
  text.replace(text.find("\"harmonic\""), std::string("\"harmonic\"").size(), "\"polynomial\"");
  text += "[sweep]\nparameter = \"trap.frequency\"\nvalues = [\"1 MHz\", \"0 MHz\", \"1.2 MHz\"]\n";
  std::ofstream(dir / "s.toml") << text;

  REQUIRE(run(dir, "sweep s.toml -o out --jobs 1") == 0);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("1 of 3 point(s) failed"));
  const std::string csv = read_all(dir / "out" / "sweep.csv");
  CHECK_THAT(csv, Catch::Contains(",failed\n") && Catch::Contains("# failed: trap.frequency = 0 MHz: ") &&
                      Catch::Contains("does not confine"));
  const auto rows = trapwork_test::csv_rows(csv);
  REQUIRE(rows.size() == 3);
  int failed = 0;
  for (const auto& r : rows) {
    failed += r.back() == 1;
    CHECK(std::isnan(r[1]) == (r.back() == 1));  // a failed point has no numbers; the others do
  }
  CHECK(failed == 1);

  // --resume keeps the failed point (not tried again); --retry-failed computes it again
  REQUIRE(run(dir, "sweep s.toml -o out --jobs 1 --resume") == 0);
  CHECK_THAT(read_all(dir / "stdout.txt"), Catch::Contains("3 of 3 points") && Catch::Contains("0 computed now"));
  REQUIRE(run(dir, "sweep s.toml -o out --jobs 1 --resume --retry-failed") == 0);
  CHECK_THAT(read_all(dir / "stdout.txt"), Catch::Contains("2 of 3 points") && Catch::Contains("1 computed now") &&
                                               Catch::Contains("1 failed before, tried again"));
  CHECK(run(dir, "sweep s.toml -o out --retry-failed") == 2);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("--retry-failed") && Catch::Contains("--resume"));
}
