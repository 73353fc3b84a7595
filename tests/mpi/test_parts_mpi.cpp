// `mpirun -n P trapwork work` with noise realisations and `mpirun -n P trapwork design --robust`
// (solver/sharing.hpp, mpi_part_sharing in solver/tool/sweep_mpi.cpp): the parts (realisations,
// robust members) shared among the ranks give the files of the single-process run, to the last
// digit, for P = 1, 2 and 3; a rank whose parts fail ends the run with an error naming it and
// no output. Built only when CMake found MPI. As root on the CI machine, Open MPI needs the
// options and variables of test_sweep_mpi.cpp.
#include <catch2/catch.hpp>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <string>

#include "../sweep_tables.hpp"

namespace fs = std::filesystem;
using trapwork_test::read_all;
using trapwork_test::mpirun;
using trapwork_test::run_in;

namespace {

// The harmonic move of the sweep tests with white centre noise, 7 realisations propagated one
// by one (route "realisations"): 7 is not a multiple of 2 or 3, so the ranks' shares differ.
const std::string noisy_text =
    trapwork_test::grid_sweep_text.substr(0, trapwork_test::grid_sweep_text.find("[[sweep.axis]]")) + R"([noise]
realisations = 7
seed = 5
route = "realisations"
[[noise.source]]
parameter = "trap.centre"
heating_rate = "2e4 quanta/s"
at_frequency = "1 MHz"
)";

nlohmann::json json_of(const fs::path& file) { return nlohmann::json::parse(read_all(file)); }
}  // namespace

TEST_CASE("mpirun -n 1, 2 and 3 trapwork work: the noise realisations shared give the single-process files",
          "[noise][mpi]") {
  const fs::path dir = trapwork_test::scratch_dir("test-parts-mpi", "noise");
  std::ofstream(dir / "noisy.toml") << noisy_text;
  const std::string trapwork = trapwork_test::trapwork_binary();
  REQUIRE(run_in(dir, trapwork + " work noisy.toml -o single --quiet") == 0);
  const std::string lines = read_all(dir / "single" / "noise_lines.csv");
  const auto noise = json_of(dir / "single" / "summary.json").at("noise");
  REQUIRE(noise.at("realisations") == 7);
  for (int ranks : {1, 2, 3}) {
    INFO(ranks << " rank(s)");
    const std::string out = "mpi" + std::to_string(ranks);
    REQUIRE(run_in(dir, mpirun(ranks) + " work noisy.toml -o " + out) == 0);
    CHECK(read_all(dir / out / "noise_lines.csv") == lines);  // every digit
    CHECK(json_of(dir / out / "summary.json").at("noise") == noise);
    const std::string report = read_all(dir / "stdout.txt");
    if (ranks == 2) CHECK_THAT(report, Catch::Contains("MPI: 2 ranks; the 7 noise realisations shared") &&
                                           Catch::Contains("...: 4, 3)"));
    if (ranks == 3) CHECK_THAT(report, Catch::Contains("...: 3, 2, 2)"));
    if (ranks == 1) CHECK_THAT(report, !Catch::Contains("MPI:"));
  }
  // A rank whose realisations fail: every rank ends, the error names it, no file is written.
  CHECK(run_in(dir, "TRAPWORK_TEST_FAIL_RANK=2 " + mpirun(3) + " work noisy.toml -o failed") != 0);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("rank 2 of 3 failed: a failure injected for a test"));
  CHECK_FALSE(fs::exists(dir / "failed" / "summary.json"));
  CHECK_FALSE(fs::exists(dir / "failed" / "noise_lines.csv"));
}

TEST_CASE("mpirun -n 1, 2 and 3 trapwork design --robust: the members shared give the single-process design",
          "[design][mpi]") {
  const fs::path dir = trapwork_test::scratch_dir("test-parts-mpi", "design");
  const std::string trapwork = trapwork_test::trapwork_binary();
  // Three members (the nominal trap and two variants), two evaluations of each.
  const std::string design = " design '" + (fs::path(TRAPWORK_SOURCE_DIR) / "examples" / "ion_design.toml").string() +
                             "' --starts 1 --evaluations 6 --robust 'trap.quartic=0.012 h*Hz/nm^4' "
                             "--robust 'trap.cubic=-0.4 h*Hz/nm^3'";
  REQUIRE(run_in(dir, trapwork + design + " -o single --quiet") == 0);
  const std::string history = read_all(dir / "single" / "design_history.csv");
  const std::string table = read_all(dir / "single" / "designed_trap_centre.csv");
  const auto robust = json_of(dir / "single" / "design_summary.json").at("robust");
  REQUIRE(robust.at("members").size() == 3);
  for (int ranks : {1, 2, 3}) {
    INFO(ranks << " rank(s)");
    const std::string out = "mpi" + std::to_string(ranks);
    REQUIRE(run_in(dir, mpirun(ranks) + design + " -o " + out) == 0);
    CHECK(read_all(dir / out / "design_history.csv") == history);
    CHECK(read_all(dir / out / "designed_trap_centre.csv") == table);
    CHECK(json_of(dir / out / "design_summary.json").at("robust") == robust);
    if (ranks > 1)
      CHECK_THAT(read_all(dir / "stdout.txt"), Catch::Contains("the 3 robust members shared at every evaluation"));
  }
  CHECK(run_in(dir, "TRAPWORK_TEST_FAIL_RANK=1 " + mpirun(2) + design + " -o failed") != 0);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("rank 1 of 2 failed"));
  CHECK_FALSE(fs::exists(dir / "failed" / "design_summary.json"));
}
