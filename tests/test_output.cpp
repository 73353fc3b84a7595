// Output writers: atomic files, CSV layout, number text.
#include <catch2/catch.hpp>

#include "scratch_files.hpp"
#include <cmath>
#include <filesystem>
#include <fstream>
#include <limits>
#include <sstream>

#include "solver/scenario/output.hpp"
#include "solver/scenario/work_output.hpp"

#include <sys/wait.h>
#include <unistd.h>

#include <csignal>

#include "solver/errors.hpp"

using namespace trapwork;
namespace fs = std::filesystem;

namespace {
fs::path scratch_dir(const std::string& name) { return trapwork_test::scratch_dir("test-output", name); }

using trapwork_test::read_all;

int files_in(const fs::path& dir) {
  return int(std::distance(fs::directory_iterator(dir), fs::directory_iterator()));
}
}  // namespace

TEST_CASE("files are written whole or not at all", "[output]") {
  const fs::path dir = scratch_dir("atomic");
  const fs::path target = dir / "table.csv";
  write_file_atomically(target, [](std::ostream& out) { out << "a,b\n1,2\n"; });
  CHECK(read_all(target) == "a,b\n1,2\n");
  CHECK(files_in(dir) == 1);  // no temporary left

  // A writer that fails halfway leaves the old file as it was and no temporary behind.
  CHECK_THROWS_WITH(write_file_atomically(target,
                                          [](std::ostream& out) {
                                            out << "half a row,";
                                            throw std::runtime_error("writer failed");
                                          }),
                    "writer failed");
  CHECK(read_all(target) == "a,b\n1,2\n");
  CHECK(files_in(dir) == 1);

  // Same for a new file: nothing appears.
  CHECK_THROWS(write_file_atomically(dir / "new.csv", [](std::ostream&) { throw std::runtime_error("x"); }));
  CHECK_FALSE(fs::exists(dir / "new.csv"));
  CHECK(files_in(dir) == 1);

  // A folder that does not exist cannot be written: an error, not a silent skip.
  CHECK_THROWS(write_file_atomically(dir / "missing" / "x.csv", [](std::ostream& out) { out << 1; }));
}

TEST_CASE("numbers read back exactly", "[output]") {
  for (double v : {0.1, 1.0 / 3.0, -2.5e-300, 6.62607015e-34, 1e22, 123456789.123456789}) {
    INFO(v);
    CHECK(std::stod(number_text(v)) == v);
  }
  CHECK(number_text(std::numeric_limits<double>::quiet_NaN()) == "nan");
  CHECK(number_text(-std::numeric_limits<double>::infinity()) == "-inf");
  CHECK(number_text(2.0) == "2");
}

// Issue 14: a skewness whose variance comes from lines at the rounding level of probabilities
// is not defined (today it printed values such as 8.5e9).
TEST_CASE("issue 14: skewness is not defined when the variance is rounding noise", "[output]") {
  auto distribution = [](std::vector<std::pair<double, double>> lines) {
    WorkDistribution d;
    for (const auto& [w, p] : lines) d.lines.push_back({w, p, 0, 0});
    double total = 0, mean = 0, m2 = 0, m3 = 0;
    for (const auto& l : d.lines) total += l.probability, mean += l.probability * l.work;
    mean /= total;
    for (const auto& l : d.lines) {
      const double x = l.work - mean;
      m2 += l.probability * x * x;
      m3 += l.probability * x * x * x;
    }
    d.mean = mean;
    d.variance = m2 / total;
    d.skewness = d.variance > 0 ? (m3 / total) / std::pow(d.variance, 1.5) : 0.0;
    return d;
  };
  // one line at the 1e-19 level: skewness ~ 1/sqrt(1e-19) = 3e9, meaningless
  const WorkDistribution noise = distribution({{0.0, 1.0}, {1.0, 1e-19}});
  CHECK(noise.skewness > 1e9);  // what was printed before
  CHECK(std::isnan(defined_skewness(noise)));
  // a single line: no spread at all
  CHECK(std::isnan(defined_skewness(distribution({{0.5, 1.0}}))));
  // a real distribution keeps its value: p = 0.1 at W = 1 gives skewness (1 - 2p)/sqrt(p(1-p)) = 2.667
  const WorkDistribution real = distribution({{0.0, 0.9}, {1.0, 0.1}});
  CHECK(defined_skewness(real) == real.skewness);
  CHECK(real.skewness == Approx(0.8 / std::sqrt(0.09)).epsilon(1e-12));
  // the boundary: a line of probability 1e-12 (above the floor 1e-13) still counts
  CHECK_FALSE(std::isnan(defined_skewness(distribution({{0.0, 1.0}, {1.0, 1e-12}}))));
}

TEST_CASE("CSV: column names first, then comments, then rows", "[output]") {
  CsvTable t;
  t.columns = {{"level", {0, 1}}, {"energy_h_kHz", {500.5, std::nan("")}}};
  t.comments = {"energies in h*kHz"};
  std::ostringstream out;
  write_csv(out, t);
  // numpy.genfromtxt(names=True) takes the first line as names even if it starts with '#'
  // (checked with numpy 1.24's genfromtxt), so the names must come first.
  CHECK(out.str() == "level,energy_h_kHz\n# energies in h*kHz\n0,500.5\n1,nan\n");
  t.columns[1].values.pop_back();
  std::ostringstream bad;
  CHECK_THROWS_AS(write_csv(bad, t), std::logic_error);
}

TEST_CASE("unit names become column-name parts", "[output]") {
  CHECK(column_unit("h*kHz") == "h_kHz");
  CHECK(column_unit("kB*uK") == "kB_uK");
  CHECK(column_unit("hbar*omega") == "hbar_omega");
  CHECK(column_unit("natural") == "natural");
}

// ---- issue 14: one run's hold on its output folder (OutputRun) ---------------------------

namespace {
// Writes `text` to <staging>/<name> and returns the path (a command's writer in small).
fs::path stage(OutputRun& run, const std::string& name, const std::string& text) {
  const fs::path p = run.staging() / name;
  write_file_atomically(p, [&](std::ostream& o) { o << text; });
  return p;
}
bool has_staging(const fs::path& dir) {
  for (const auto& e : fs::directory_iterator(dir))
    if (e.path().filename().string().rfind(".trapwork-new-", 0) == 0) return true;
  return false;
}
const std::vector<std::string> names = {"a.csv", "b.csv"};
}  // namespace

TEST_CASE("issue 14: an output never replaces an input of the run, however the path is written", "[output]") {
  const fs::path dir = scratch_dir("inputs");
  fs::create_directories(dir / "out");
  std::ofstream(dir / "out" / "a.csv") << "measured\n";
  fs::create_hard_link(dir / "out" / "a.csv", dir / "linked.csv");
  for (const fs::path& input : {dir / "out" / "a.csv", dir / "out" / ".." / "out" / "a.csv", dir / "linked.csv"}) {
    INFO(input);
    try {
      OutputRun run(dir / "out", names, {{input, "the data file"}}, "trapwork test");
      FAIL("an output that replaces an input was accepted");
    } catch (const InputError& e) {
      CHECK_THAT(e.what(), Catch::Contains("a.csv here is the data file"));
    }
  }
  CHECK(read_all(dir / "out" / "a.csv") == "measured\n");
  // the input given as the output folder itself
  CHECK_THROWS_WITH(OutputRun(dir / "linked.csv", names, {{dir / "linked.csv", "the scenario"}}, "t"),
                    Catch::Contains("an output folder, not the scenario"));
  // an input in the folder that the run does not write is fine, and survives the run
  OutputRun ok(dir / "out", {"b.csv"}, {{dir / "out" / "a.csv", "the data file"}}, "t");
  ok.commit({stage(ok, "b.csv", "1\n")});
  CHECK(read_all(dir / "out" / "a.csv") == "measured\n");
}

TEST_CASE("issue 14: a folder that cannot be written is refused when the run starts", "[output]") {
  const fs::path dir = scratch_dir("unwritable");
  std::ofstream(dir / "plain-file") << "x";
  try {
    OutputRun run(dir / "plain-file" / "out", names, {}, "t");
    FAIL("no error for a folder under a file");
  } catch (const InputError& e) {
    CHECK(e.file == (dir / "plain-file" / "out").string());
    CHECK_THAT(e.what(), Catch::Contains("cannot create the output folder") && Catch::Contains("Not a directory"));
  }
  // A run that fails leaves no folder it made (and no lock file in a folder it did not make).
  { OutputRun failed(dir / "new", names, {}, "t"); }
  CHECK_FALSE(fs::exists(dir / "new"));
}

TEST_CASE("issue 14: a second run on a locked folder says who holds it", "[output]") {
  const fs::path dir = scratch_dir("lock");
  {
    OutputRun first(dir, names, {}, "trapwork work first.toml");
    try {
      OutputRun second(dir, names, {}, "trapwork work second.toml");
      FAIL("two runs held one folder");
    } catch (const InputError& e) {
      CHECK_THAT(e.what(), Catch::Contains("in use by another trapwork run") &&
                               Catch::Contains("pid " + std::to_string(::getpid())) &&
                               Catch::Contains("trapwork work first.toml") && Catch::Contains("started "));
    }
    first.commit({stage(first, "a.csv", "first\n")});
  }
  // The lock file stays, but its lock went with its run: the next run is not blocked.
  REQUIRE(fs::exists(dir / ".trapwork-lock"));
  OutputRun third(dir, names, {}, "trapwork work third.toml");
  CHECK_THAT(read_all(dir / ".trapwork-lock"), Catch::Contains("trapwork work third.toml"));
}

TEST_CASE("issue 14: the folder holds one whole run; other files stay", "[output]") {
  const fs::path dir = scratch_dir("swap");
  {
    OutputRun run(dir, names, {}, "t");
    const auto files = run.commit({stage(run, "a.csv", "old a\n"), stage(run, "b.csv", "old b\n")});
    CHECK(files == std::vector<fs::path>{dir / "a.csv", dir / "b.csv"});
  }
  std::ofstream(dir / "notes.txt") << "mine\n";
  // what a killed run leaves: a staging folder and a temporary file; the next run removes them
  fs::create_directories(dir / ".trapwork-new-999999");
  std::ofstream(dir / "a.csv.tmp-999999") << "half";
  {
    OutputRun run(dir, names, {}, "t");
    CHECK_FALSE(fs::exists(dir / ".trapwork-new-999999"));
    CHECK_FALSE(fs::exists(dir / "a.csv.tmp-999999"));
    const fs::path staged = stage(run, "a.csv", "new a\n");
    CHECK(read_all(dir / "a.csv") == "old a\n");  // nothing changes before commit
    run.commit({staged});
  }
  CHECK(read_all(dir / "a.csv") == "new a\n");
  CHECK_FALSE(fs::exists(dir / "b.csv"));  // the previous run's file this run did not write
  CHECK(read_all(dir / "notes.txt") == "mine\n");
  CHECK_FALSE(has_staging(dir));
  // an undeclared output is a programmer error
  OutputRun run(dir, names, {}, "t");
  CHECK_THROWS_AS(run.commit({stage(run, "c.csv", "x")}), std::logic_error);
}

TEST_CASE("issue 14: SIGTERM during the write phase leaves the previous run whole", "[output]") {
  const fs::path dir = scratch_dir("signal");
  {
    OutputRun run(dir, names, {}, "t");
    run.commit({stage(run, "a.csv", "old a\n"), stage(run, "b.csv", "old b\n")});
  }
  const pid_t child = ::fork();
  REQUIRE(child >= 0);
  if (child == 0) {  // the interrupted run: half its files staged when the signal comes
    std::signal(SIGTERM, SIG_DFL);  // as in the tool (Catch2 installs its own handler)
    try {
      OutputRun run(dir, names, {}, "t");
      const fs::path a = stage(run, "a.csv", "new a\n");
      ::raise(SIGTERM);  // only sets the flag now
      const fs::path b = stage(run, "b.csv", "new b\n");
      run.commit({a, b});
    } catch (...) {
    }
    ::_exit(0);  // reached only if the signal did not end the run
  }
  int status = 0;
  REQUIRE(::waitpid(child, &status, 0) == child);
  INFO("wait status " << status);
  REQUIRE(WIFSIGNALED(status));
  CHECK(WTERMSIG(status) == SIGTERM);
  CHECK(read_all(dir / "a.csv") == "old a\n");
  CHECK(read_all(dir / "b.csv") == "old b\n");
  CHECK_FALSE(has_staging(dir));
  OutputRun next(dir, names, {}, "t");  // the lock died with the child
}

// Issue 14: with [units] natural = true the header and summary.json say what a bare number
// means in lab units; without it they say nothing about natural units.
TEST_CASE("issue 14: natural units are stated in the header and the summary", "[output]") {
  const std::string text = R"([particle]
mass = "40 u"
[units]
natural = true
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
centre = 2
)";
  const Scenario s = read_scenario_text(text, "natural.toml");
  std::ostringstream header;
  print_scenario_header(header, "spectrum", s);
  // L0 = sqrt(hbar/(m omega)) = 15.9 nm for 40 u at 1 MHz; E0 = hbar omega = h*1 MHz; T0 = 1/omega
  CHECK_THAT(header.str(), Catch::Contains("natural     bare numbers in the file: hbar = m = 1 (m = 40 u), length L0 = 15.8962 nm") &&
                               Catch::Contains("= hbar*omega_ref (f_ref = 1 MHz)") && Catch::Contains("= 1/omega_ref") &&
                               Catch::Contains("time m L0^2/hbar = 159.155 ns"));
  const auto units = units_json(s);
  CHECK(units.at("natural").at("used") == true);
  CHECK(units.at("natural").at("meaning").get<std::string>().find("length L0 = 15.8962 nm") != std::string::npos);

  const Scenario lab = read_scenario_text(R"([particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
)", "lab.toml");
  std::ostringstream plain;
  print_scenario_header(plain, "spectrum", lab);
  CHECK_THAT(plain.str(), !Catch::Contains("natural"));
  CHECK(units_json(lab).at("natural").at("used") == false);
}
