// Issue 20: `mpirun -n P trapwork sweep` (solver/tool/sweep_mpi.cpp) gives the table of the
// single-process sweep for P = 1, 2 and 3, and a rank that dies mid-sweep leaves a table that
// --resume completes, with another number of ranks. Built only when CMake found MPI.
//
// Run as root on the CI machine (a container with 2 cores), Open MPI's mpirun needs
// --allow-run-as-root and the environment OMPI_ALLOW_RUN_AS_ROOT=1 and
// OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1 to start at all, and --oversubscribe to start 3 ranks on 2
// cores; both are harmless for other users. Each rank runs one point at a time (--jobs 1).
#include <catch2/catch.hpp>
#include <filesystem>
#include <fstream>
#include <string>

#include "../sweep_tables.hpp"

namespace fs = std::filesystem;
using trapwork_test::read_all;
using trapwork_test::mpirun;
using trapwork_test::run_in;

namespace {

// A 2 x 3 grid of the cheap harmonic move: six points of about half a second.
const std::string grid_text = trapwork_test::grid_sweep_text.substr(0, trapwork_test::grid_sweep_text.rfind("values =")) +
                              "values = [0.1, 0.3, 0.5]\n";
constexpr std::size_t grid_points = 6;

std::size_t points_recorded(const fs::path& file) {
  std::ifstream in(file);
  std::size_t lines = 0;
  for (std::string line; std::getline(in, line);) lines += !line.empty();
  return lines > 0 ? lines - 1 : 0;
}
}  // namespace

TEST_CASE("issue 20: mpirun -n 1, 2 and 3 give the single-process sweep table", "[sweep][mpi][issue20]") {
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-mpi", "ranks");
  std::ofstream(dir / "grid.toml") << grid_text;
  const std::string trapwork = trapwork_test::trapwork_binary();
  REQUIRE(run_in(dir, trapwork + " sweep grid.toml -o single --jobs 2 --quiet") == 0);
  const std::string single = read_all(dir / "single" / "sweep.csv");
  REQUIRE(trapwork_test::csv_rows(single).size() == grid_points);
  for (int ranks : {1, 2, 3}) {
    INFO(ranks << " rank(s)");
    const std::string out = "mpi" + std::to_string(ranks);
    REQUIRE(run_in(dir, mpirun(ranks) + " sweep grid.toml -o " + out + " --jobs 1") == 0);
    trapwork_test::check_same_table(read_all(dir / out / "sweep.csv"), single);
    CHECK(fs::exists(dir / out / "sweep_map_mean.png"));
    const std::string report = read_all(dir / "stdout.txt");
    if (ranks > 1) {
      // rank 0 hands out the points and computes some too; the ranks computed all of them between them
      CHECK_THAT(report, Catch::Contains("MPI: " + std::to_string(ranks) + " ranks") &&
                             Catch::Contains("every rank computes them") && Catch::Contains("load balance"));
      std::size_t computed = 0;
      for (int r = 0; r < ranks; ++r) {
        const std::string label = "  rank " + std::to_string(r) + ": ";
        const auto at = report.find(label);
        REQUIRE(at != std::string::npos);
        computed += std::stoul(report.substr(at + label.size()));
      }
      CHECK(computed == grid_points);
    } else {
      CHECK_THAT(report, !Catch::Contains("MPI:"));  // one rank runs the sweep itself
    }
  }
}

TEST_CASE("issue 20: a rank killed mid-sweep leaves a table that --resume with other ranks completes",
          "[sweep][mpi][issue20]") {
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-mpi", "kill");
  std::ofstream(dir / "grid.toml") << grid_text;
  const std::string trapwork = trapwork_test::trapwork_binary();
  REQUIRE(run_in(dir, trapwork + " sweep grid.toml -o single --jobs 1 --quiet") == 0);
  const std::string single = read_all(dir / "single" / "sweep.csv");
  // TRAPWORK_TEST_ABORT_AT_POINT (sweep_mpi.cpp, for tests only): the rank handed point 4
  // (0-based) aborts, as a killed process ends (rank 0 too, whose threads compute points);
  // mpirun then ends the job.
  CHECK(run_in(dir, "TRAPWORK_TEST_ABORT_AT_POINT=4 " + mpirun(3) + " sweep grid.toml -o cut --jobs 1") != 0);
  const std::size_t before = points_recorded(dir / "cut" / "sweep-points.txt");
  INFO("points recorded before the abort: " << before);
  CHECK(before < grid_points);
  // Whatever was on disk is whole: sweep.csv and its record were replaced atomically.
  const auto partial = trapwork_test::csv_rows(read_all(dir / "cut" / "sweep.csv"));
  CHECK(partial.size() <= before);
  REQUIRE(run_in(dir, mpirun(2) + " sweep grid.toml -o cut --jobs 1 --resume") == 0);
  CHECK_THAT(read_all(dir / "stdout.txt"),
             Catch::Contains(std::to_string(before) + " of " + std::to_string(grid_points) + " points"));
  trapwork_test::check_same_table(read_all(dir / "cut" / "sweep.csv"), single);
}
