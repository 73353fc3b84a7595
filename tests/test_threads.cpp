// Thread independence and reproducibility of the work statistics: the FFTW thread count of
// run_work, the number of sweep points run at once, and a repeated run must not change the
// numbers beyond rounding.
//
// Tolerance 1e-12 (absolute, on probabilities and on work values and moments in internal
// energy units, which are of order one here): two FFT plans (one thread or two) differ only in
// the order of their sums, a few eps per transform; over a propagation of a few thousand steps
// these differences add up to at most steps * few eps, about 1e-12 (common practice for a
// rounding budget that grows linearly with the number of operations).
#include "solver/scenario/output.hpp"

#include <dlfcn.h>
#include <pthread.h>
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <cerrno>
#include <functional>
#include <iostream>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <set>
#include <string>
#include <vector>

#include "scratch_files.hpp"
#include "solver/tool/commands.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/work.hpp"

using namespace trapwork;
namespace fs = std::filesystem;

// Test hook (this executable only, never the library): pthread_create, which std::thread
// calls, is interposed here so that a test can make the system refuse threads as a process
// limit would (ulimit -u; root is exempt from it, so the limit itself cannot be used). It
// starts `threads_allowed` more threads, refuses the next one with EAGAIN, then starts threads
// again (so that libraries used afterwards, such as the plots' font code, are not affected);
// negative: no refusal. The code under test stops asking at the first refusal.
namespace {
int threads_allowed = -1;
int threads_started = 0;  // threads the hook let start (counted for the test that needs the order)
}
extern "C" int pthread_create(pthread_t* thread, const pthread_attr_t* attributes, void* (*start)(void*),
                              void* argument) {
  using Create = int (*)(pthread_t*, const pthread_attr_t*, void* (*)(void*), void*);
  static const Create real = reinterpret_cast<Create>(dlsym(RTLD_NEXT, "pthread_create"));
  if (threads_allowed == 0) {
    threads_allowed = -1;
    return EAGAIN;
  }
  if (threads_allowed > 0) --threads_allowed;
  ++threads_started;
  return real(thread, attributes, start, argument);
}

namespace {
constexpr double tolerance = 1e-12;  // see the file comment

// The small shuttle of scratch_files.hpp. (Sweep durations avoid whole trap periods, where <W> is near 0 and the skewness is noise.)
const std::string scenario_text = trapwork_test::small_shuttle_text;

WorkResult run_with_threads(int threads) {
  const Scenario s = read_scenario_text(scenario_text, "threads.toml");
  WorkRequest request = work_request(s);
  request.threads = threads;
  return run_work(s.potential, build_protocol(s), request);
}

// Checks that two distributions agree line by line and in every moment to `tol`.
void check_same_distribution(const WorkDistribution& a, const WorkDistribution& b, double tol) {
  REQUIRE(a.lines.size() == b.lines.size());
  double worst_work = 0, worst_probability = 0;
  for (std::size_t i = 0; i < a.lines.size(); ++i) {
    CHECK(a.lines[i].initial == b.lines[i].initial);
    CHECK(a.lines[i].final == b.lines[i].final);
    worst_work = std::max(worst_work, std::abs(a.lines[i].work - b.lines[i].work));
    worst_probability = std::max(worst_probability, std::abs(a.lines[i].probability - b.lines[i].probability));
  }
  INFO("largest difference: work " << worst_work << ", probability " << worst_probability);
  CHECK(worst_work <= tol);
  CHECK(worst_probability <= tol);
  CHECK(std::abs(a.mean - b.mean) <= tol);
  CHECK(std::abs(a.variance - b.variance) <= tol);
  CHECK(std::abs(a.skewness - b.skewness) <= tol);
  CHECK(std::abs(a.resolved_weight - b.resolved_weight) <= tol);
  CHECK(std::abs(a.free_energy_change - b.free_energy_change) <= tol);
  CHECK(std::abs(a.jarzynski_residual - b.jarzynski_residual) <= tol);
}

void check_same_matrix(const TransitionMatrix& a, const TransitionMatrix& b, double tol) {
  REQUIRE(a.probability.rows() == b.probability.rows());
  REQUIRE(a.probability.cols() == b.probability.cols());
  const double worst = (a.probability - b.probability).cwiseAbs().maxCoeff();
  INFO("largest difference of P(m -> n): " << worst);
  CHECK(worst <= tol);
}

// The numbers of a trapwork CSV, row by row (names line and '#' comments skipped).

bool same_or_both_nan(double a, double b, double tol) {
  return (std::isnan(a) && std::isnan(b)) || std::abs(a - b) <= tol * std::max(1.0, std::abs(b));
}
}  // namespace

TEST_CASE("run_work with one and with two FFTW threads gives the same work distribution", "[threads]") {
  const WorkResult one = run_with_threads(1);
  const WorkResult two = run_with_threads(2);
  REQUIRE(one.steps == two.steps);
  REQUIRE(one.grid.size() == two.grid.size());
  REQUIRE(one.distribution.lines.size() > 5);  // an anharmonic trap: many separate lines
  check_same_matrix(one.forward.transitions, two.forward.transitions, tolerance);
  check_same_distribution(one.distribution, two.distribution, tolerance);
  REQUIRE(one.reverse_distribution);
  REQUIRE(two.reverse_distribution);
  check_same_distribution(*one.reverse_distribution, *two.reverse_distribution, tolerance);
}

TEST_CASE("two identical runs give identical results", "[threads]") {
  for (int threads : {1, 2}) {
    INFO("threads " << threads);
    const WorkResult first = run_with_threads(threads);
    const WorkResult second = run_with_threads(threads);
    // Same inputs, same plans (FFTW reuses what it measured for the first), same order of
    // operations: equal to the last bit.
    check_same_matrix(first.forward.transitions, second.forward.transitions, 0);
    check_same_distribution(first.distribution, second.distribution, 0);
  }
}

TEST_CASE("trapwork sweep with --jobs 1 and --jobs 2 writes the same numbers", "[threads][cli]") {
  const fs::path dir = trapwork_test::scratch_dir("test-threads", "sweep");
  std::ofstream(dir / "sweep.toml") << scenario_text
                                    << "[sweep]\nparameter = \"protocol.duration\"\n"
                                       "values = [\"1.5 us\", \"0.6 us\", \"1.3 us\"]\n";
  const fs::path binary = fs::path(TRAPWORK_BINARY_DIR) / "trapwork";
  for (const char* jobs : {"1", "2"}) {
    const std::string command = "cd '" + dir.string() + "' && '" + binary.string() + "' sweep sweep.toml -o jobs" +
                                jobs + " --jobs " + jobs + " --quiet";
    const int status = std::system(command.c_str());
    REQUIRE(WIFEXITED(status));
    REQUIRE(WEXITSTATUS(status) == 0);
  }
  const std::size_t crooks_column = trapwork_test::csv_column_index(
      trapwork_test::read_all(dir / "jobs1" / "sweep.csv"), "crooks_ratio_error");
  const auto one = trapwork_test::csv_rows(trapwork_test::read_all(dir / "jobs1" / "sweep.csv"));
  const auto two = trapwork_test::csv_rows(trapwork_test::read_all(dir / "jobs2" / "sweep.csv"));
  REQUIRE(one.size() == 3);
  REQUIRE(two.size() == one.size());
  for (std::size_t r = 0; r < one.size(); ++r) {
    REQUIRE(two[r].size() == one[r].size());
    for (std::size_t c = 0; c < one[r].size(); ++c) {
      INFO("row " << r << ", column " << c << ": " << one[r][c] << " vs " << two[r][c]);
      if (c == crooks_column) {
        // max |P_F / (P_R e^...) - 1| over lines down to 1e-10: itself rounding of the smallest
        // probabilities (about 1e-11 here), so not compared; both must stay that small.
        CHECK(std::abs(one[r][c]) < 1e-9);
        CHECK(std::abs(two[r][c]) < 1e-9);
        continue;
      }
      // energies in h*kHz are about 1000 times the internal ones: the bound is relative
      CHECK(same_or_both_nan(one[r][c], two[r][c], tolerance));
    }
  }
}

namespace {
// Runs `body` in a forked child whose thread number `allowed` + 1 is refused; the child's exit code is
// body's result (0: as expected; otherwise it printed why). A child that does not finish in
// 120 s is killed by its alarm: a hang fails the test instead of stopping the suite.
int in_child_with_threads(int allowed, const std::function<int()>& body) {
  std::cout.flush();
  const pid_t pid = fork();
  if (pid == 0) {
    alarm(120);
    threads_allowed = allowed;
    int code = 3;
    try {
      code = body();
    } catch (const std::exception& e) {
      std::cerr << "child: exception: " << e.what() << '\n';
      code = 4;
    }
    std::cout.flush();
    std::cerr.flush();
    _exit(code);
  }
  int status = 0;
  waitpid(pid, &status, 0);
  if (WIFSIGNALED(status)) return 128 + WTERMSIG(status);  // 142: the alarm (a hang); 134: abort (terminate)
  return WEXITSTATUS(status);
}
}  // namespace

TEST_CASE("issue 14: a worker thread the system refuses to start neither hangs nor aborts the run", "[threads]") {
  const WorkResult reference = run_with_threads(1);
  // A 4-thread run starts threads for its spectra (H_A and H_B solved at once) and 3 workers for
  // each propagation (forward, reverse). Counted in a run where nothing is refused; then each of
  // them in turn is refused, in a child of its own: the run must finish with the numbers of one
  // thread, and say so when a propagation lost workers ("propagated with k of 4 threads").
  threads_started = 0;
  (void)run_with_threads(4);
  const int started = threads_started;
  REQUIRE(started >= 6);
  std::set<int> propagated_with;  // the k of the warnings seen
  for (int refused = 0; refused < started; ++refused) {
    INFO("thread refused: number " << refused << " of " << started << " (child exit 142: hung, 134: aborted)");
    const int code = in_child_with_threads(refused, [&] {
      const WorkResult r = run_with_threads(4);
      // the same numbers as one thread (the block split does not depend on the thread count)
      const double worst = (r.forward.transitions.probability - reference.forward.transitions.probability)
                               .cwiseAbs()
                               .maxCoeff();
      if (!(worst <= tolerance) || !(std::abs(r.distribution.mean - reference.distribution.mean) <= tolerance)) {
        std::cerr << "child: results differ from one thread by " << worst << '\n';
        return 2;
      }
      for (const auto& w : r.diagnostics.warnings)
        for (int k = 1; k < 4; ++k)
          if (w.find("propagated with " + std::to_string(k) + " of 4 threads") != std::string::npos) return 10 + k;
      return 0;
    });
    CHECK((code == 0 || (code > 10 && code < 14)));
    if (code > 10 && code < 14) propagated_with.insert(code - 10);
  }
  // refusing a pool's first worker leaves 1 of 4 threads, its second 2 of 4
  CHECK(propagated_with.count(1) == 1);
  CHECK(propagated_with.count(2) == 1);
}

TEST_CASE("issue 14: a sweep whose point threads the system refuses runs on the threads it has", "[threads][cli]") {
  const fs::path dir = trapwork_test::scratch_dir("test-threads", "refused");
  std::ofstream(dir / "sweep.toml") << scenario_text
                                    << "[sweep]\nparameter = \"protocol.duration\"\n"
                                       "values = [\"1.5 us\", \"0.6 us\", \"1.3 us\"]\n";
  for (int allowed : {0, 1}) {  // no thread for the points (they run on the caller), or one of 3
    INFO("point threads the system starts: " << allowed << " (child exit 142: hung, 134: aborted)");
    const fs::path out = dir / ("allowed" + std::to_string(allowed));
    const int code = in_child_with_threads(allowed, [&] {
      SweepCommand c;
      c.scenario = (dir / "sweep.toml").string();
      c.output = out.string();
      c.jobs = 3;
      std::ostringstream report, progress;
      run_sweep_command(c, report, progress);
      const std::string expected = std::to_string(std::max(allowed, 1)) + " at a time (of 3 asked for: the system refused";
      if (report.str().find(expected) == std::string::npos) {
        std::cerr << "child: the report does not say \"" << expected << "\":\n" << report.str();
        return 1;
      }
      return 0;
    });
    CHECK(code == 0);
    CHECK(trapwork_test::csv_rows(trapwork_test::read_all(out / "sweep.csv")).size() == 3);
  }
}
