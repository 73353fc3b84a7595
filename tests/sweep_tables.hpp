#pragma once
// Helpers of the multi-parameter, shard and MPI sweep tests (issue 20): a cheap two-parameter
// scenario, running the trapwork binary, and comparing two sweep.csv files.
#include <sys/wait.h>

#include <catch2/catch.hpp>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <sstream>
#include <string>

#include "scratch_files.hpp"

namespace trapwork_test {

// A harmonic 40 u ion at 1 MHz moved by 30 nm over a 2 x 2 grid of duration and mean phonon
// number: about half a second per point. No duration is a whole number of trap periods (where
// <W> = 0 and the skewness is rounding noise).
inline const std::string grid_sweep_text = harmonic_move_text + R"([work]
time_step_check = false
[[sweep.axis]]
parameter = "protocol.duration"
values = ["1.3 us", "0.7 us"]
[[sweep.axis]]
parameter = "initial.mean_phonons"
values = [0.1, 0.5]
)";

// Runs `command` in `dir` with stdout and stderr to stdout.txt, stderr.txt; returns the exit status.
inline int run_in(const std::filesystem::path& dir, const std::string& command) {
  const std::string line = "cd '" + dir.string() + "' && " + command + " > stdout.txt 2> stderr.txt";
  const int status = std::system(line.c_str());
  REQUIRE(WIFEXITED(status));
  return WEXITSTATUS(status);
}

inline std::string trapwork_binary() { return "'" + (std::filesystem::path(TRAPWORK_BINARY_DIR) / "trapwork").string() + "'"; }

#ifdef TRAPWORK_MPIEXEC
// `mpirun -n RANKS trapwork` for the MPI tests: as root, Open MPI needs --allow-run-as-root and
// these two variables; --oversubscribe lets more ranks than cores run (the CI machine has 2).
inline std::string mpirun(int ranks) {
  return std::string("OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1 '") + TRAPWORK_MPIEXEC +
         "' --allow-run-as-root --oversubscribe -n " + std::to_string(ranks) + " " + trapwork_binary();
}
#endif

// The names line and the comment lines of a trapwork CSV.
inline std::string csv_head(const std::string& csv) {
  std::string head;
  std::istringstream in(csv);
  std::string line;
  for (int i = 0; std::getline(in, line); ++i)
    if (i == 0 || (!line.empty() && line[0] == '#')) head += line + "\n";
  return head;
}

// Two sweep tables of the same points: the same names and comments (the fingerprint among
// them), the same rows in the same order, every number equal to 1e-12 relative (the rounding
// budget of tests/test_threads.cpp; sweeps plan FFTW_ESTIMATE, so the numbers are in fact
// equal), nan where the other has nan.
inline void check_same_table(const std::string& a, const std::string& b) {
  CHECK(csv_head(a) == csv_head(b));
  const auto x = csv_rows(a), y = csv_rows(b);
  REQUIRE(x.size() == y.size());
  for (std::size_t r = 0; r < x.size(); ++r) {
    REQUIRE(x[r].size() == y[r].size());
    for (std::size_t c = 0; c < x[r].size(); ++c) {
      INFO("row " << r << ", column " << c << ": " << x[r][c] << " vs " << y[r][c]);
      if (std::isnan(x[r][c]) || std::isnan(y[r][c]))
        CHECK((std::isnan(x[r][c]) && std::isnan(y[r][c])));
      else
        CHECK(std::abs(x[r][c] - y[r][c]) <= 1e-12 * std::max(1.0, std::abs(y[r][c])));
    }
  }
}

}  // namespace trapwork_test
