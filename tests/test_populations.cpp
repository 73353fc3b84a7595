// The populations reader (issue 19, item 4): per-pair shares of runs with their uncertainties,
// read as level pairs for `trapwork compare`; errors naming file, line and column.
#include <catch2/catch.hpp>
#include <cmath>
#include <fstream>
#include <sstream>
#include <tuple>

#include "scratch_files.hpp"
#include "solver/errors.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/tool/commands.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;
namespace fs = std::filesystem;

namespace {

int count_of(const LevelPairsData& d, int initial, int final) {
  int n = 0;
  for (const auto& p : d.runs) n += p.initial == initial && p.final == final;
  return n;
}

// Binomial uncertainties of shares of `runs` runs: sqrt(p (1 - p) / N).
std::string populations_text(const std::vector<std::tuple<int, int, double>>& cells, double runs,
                             const std::string& extra = "") {
  std::ostringstream o;
  o << "initial,final,population,uncertainty\n" << extra;
  for (const auto& [i, f, p] : cells) o << i << ',' << f << ',' << p << ',' << std::sqrt(p * (1 - p) / runs) << '\n';
  return o.str();
}

const std::vector<std::tuple<int, int, double>> cells = {{0, 0, 0.55}, {0, 1, 0.2}, {1, 1, 0.15}, {1, 0, 0.1}};

InputError error_of(const std::string& text) {
  try {
    read_work_data_text(text, "pops.csv");
  } catch (const InputError& e) {
    return e;
  }
  FAIL("no InputError for:\n" << text);
  return InputError("", "", "");
}

}  // namespace

TEST_CASE("issue 19: populations are read as level pairs, runs from '# runs:' or from the uncertainties",
          "[data_files][issue19]") {
  // Uncertainties of 2000 binomial runs: sum p(1-p) / sum u^2 = 2000 exactly (up to the text's
  // 6 significant digits).
  const WorkData implied = read_work_data_text(populations_text(cells, 2000), "pops.csv");
  REQUIRE(implied.kind == WorkDataKind::level_pairs);
  CHECK(implied.pairs.runs.size() == 2000);
  CHECK(count_of(implied.pairs, 0, 0) == 1100);
  CHECK(count_of(implied.pairs, 1, 0) == 200);
  CHECK_THAT(implied.pairs.origin, Contains("2000 runs implied"));
  // A '# runs:' line wins over the uncertainties.
  const WorkData stated = read_work_data_text(populations_text(cells, 2000, "# runs: 500\n"), "pops.csv");
  CHECK(stated.pairs.runs.size() == 500);
  CHECK(count_of(stated.pairs, 0, 1) == 100);
  CHECK_THAT(stated.pairs.origin, Contains("'# runs:'"));
  // The run of a pair points at its row, for compare's messages.
  CHECK(stated.pairs.lines.front() == 3);
}

TEST_CASE("issue 19: bad populations are refused naming file, line and column", "[data_files][issue19]") {
  std::string bad = populations_text(cells, 2000);
  auto at = bad.find("0.55");
  InputError e = error_of(std::string(bad).replace(at, 4, "1.55"));
  CHECK(e.file == "pops.csv");
  CHECK(e.line == 2);
  CHECK(e.column == 5);
  CHECK(e.key == "population");
  CHECK_THAT(std::string(e.what()), Contains("between 0 and 1"));
  // A second row of one pair.
  e = error_of(populations_text({{0, 0, 0.5}, {0, 1, 0.3}, {0, 0, 0.2}}, 100));
  CHECK(e.line == 4);
  CHECK_THAT(std::string(e.what()), Contains("also on line 2"));
  // Shares that do not sum to 1 (a missing pair).
  e = error_of(populations_text({{0, 0, 0.55}, {0, 1, 0.2}}, 2000));
  CHECK(e.key == "population");
  CHECK_THAT(std::string(e.what()), Contains("summing to 1"));
  // Uncertainty 0, a bad '# runs:' line.
  e = error_of("initial,final,population,uncertainty\n0,0,1,0\n");
  CHECK(e.key == "uncertainty");
  CHECK(e.line == 2);
  CHECK(e.column == 7);
  e = error_of(populations_text(cells, 2000, "# runs: 12.5\n"));
  CHECK(e.key == "runs");
  CHECK(e.line == 2);
  // More runs than the level-pair form holds (2^24).
  e = error_of(populations_text(cells, 2000, "# runs: 1e9\n"));
  CHECK(e.key == "runs");
}

TEST_CASE("issue 19: compare reads populations like the level pairs they stand for", "[data_files][issue19]") {
  // The same runs written as populations and as one row per run give the same log-likelihood.
  const std::string model = (fs::path(TRAPWORK_SOURCE_DIR) / "examples" / "ion_shuttle_model.toml").string();
  const fs::path dir = trapwork_test::scratch_dir("test-populations", "compare");
  const std::vector<std::tuple<int, int, double>> shuttle = {{0, 0, 0.62}, {0, 1, 0.16}, {1, 0, 0.12},
                                                            {1, 1, 0.06}, {1, 2, 0.04}};
  {
    std::ofstream(dir / "pops.csv") << populations_text(shuttle, 200, "# runs: 200\n# INVENTED test data\n");
    std::ofstream pairs(dir / "pairs.csv");
    pairs << "initial,final\n";
    for (const auto& [i, f, p] : shuttle)
      for (int k = 0; k < int(std::lround(p * 200)); ++k) pairs << i << ',' << f << '\n';
  }
  std::ostringstream out, progress;
  CompareCommand c;
  c.scenario = model;
  c.resamples = 0;
  c.quiet = true;
  c.data = (dir / "pops.csv").string();
  c.output = (dir / "out-pops").string();
  const CompareOutcome from_populations = run_compare_command(c, out, progress);
  c.data = (dir / "pairs.csv").string();
  c.output = (dir / "out-pairs").string();
  const CompareOutcome from_pairs = run_compare_command(c, out, progress);
  CHECK(from_populations.comparison.runs == 200);
  CHECK(from_populations.comparison.log_likelihood == Approx(from_pairs.comparison.log_likelihood).epsilon(1e-12));
  const std::string summary = trapwork_test::read_all(dir / "out-pops" / "compare_summary.json");
  CHECK_THAT(summary, Contains("'# runs:'"));
}
