// `trapwork fit`, `trapwork compare` and `trapwork plan` end to end on the invented demo data in
// examples/ (ion_spectroscopy_lines.csv, ion_work_samples.csv, both made from the model
// ion_shuttle_model.toml; see the headers of those files), checking the numbers they produce.
#include <catch2/catch.hpp>
#include <cmath>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <random>
#include <sstream>

#include "scratch_files.hpp"
#include "solver/errors.hpp"
#include "solver/tool/commands.hpp"
#include "solver/scenario/data_files.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/work_output.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;
namespace fs = std::filesystem;

namespace {

const fs::path examples = fs::path(TRAPWORK_SOURCE_DIR) / "examples";
const std::string model_file = (examples / "ion_shuttle_model.toml").string();
const std::string samples_file = (examples / "ion_work_samples.csv").string();

fs::path scratch(const std::string& name) { return trapwork_test::scratch_dir("test-data-commands", name); }

nlohmann::json read_json(const fs::path& p) { return nlohmann::json::parse(trapwork_test::read_all(p)); }

std::string replace_first(std::string text, const std::string& from, const std::string& to) {
  const auto at = text.find(from);
  REQUIRE(at != std::string::npos);
  return text.replace(at, from.size(), to);
}

// Runs `trapwork <arguments>` through the command-line layer in this process; returns the exit code.
int run_cli(std::vector<std::string> arguments) {
  CLI::App app{"trapwork", "trapwork"};
  app.require_subcommand(1);
  add_fit_command(app);
  add_compare_command(app);
  add_plan_command(app);
  arguments.insert(arguments.begin(), "trapwork");
  std::vector<char*> argv;
  for (auto& a : arguments) argv.push_back(a.data());
  return run_command_line(app, int(argv.size()), argv.data());
}

}  // namespace

TEST_CASE("fit of the example lines recovers the generating trap, and its scenario runs", "[fit_command]") {
  const fs::path dir = scratch("fit");
  FitCommand c;
  c.data = (examples / "ion_spectroscopy_lines.csv").string();
  c.start = (examples / "ion_spectroscopy_start.toml").string();
  c.terms = "frequency,cubic,quartic";
  c.output = dir.string();
  c.quiet = true;
  const FitResultFiles files = run_fit_command(c, std::cout);
  const auto summary = read_json(files.summary);
  CHECK(summary["transitions"] == 12);
  CHECK(summary["skipped_rows"] == 1);  // the row marked keep = 0

  // The lines were made from ion_shuttle_model.toml (same mass and [units], so the same internal units).
  const Scenario truth = read_scenario(model_file);
  const char* names[] = {"frequency", "cubic", "quartic"};
  REQUIRE(summary["coefficients"].size() == 3);
  for (int q = 0; q < 3; ++q) {
    const auto& k = summary["coefficients"][q];
    CHECK(k["name"] == names[q]);
    const double true_value = truth.potential.parameter(std::string("trap.") + names[q]);
    const double value = k["value_internal"], sigma = k["uncertainty_internal"];
    INFO(names[q] << ": fitted " << value << " +- " << sigma << ", true " << true_value);
    // Gaussian noise of the stated size: |fitted - true| < 4 sigma fails with probability 6e-5.
    CHECK(std::abs(value - true_value) < 4 * sigma);
    // The cubic and quartic terms are resolved (the noise is 15-30 Hz on ~1 MHz lines).
    CHECK(sigma < 0.05 * std::abs(true_value));
  }
  // chi^2 with 9 degrees of freedom: mean 9, sd sqrt(18); 5 sd above.
  CHECK(double(summary["chi_square"]) < 9 + 5 * std::sqrt(18.0));
  CHECK(summary["degrees_of_freedom"] == 9);

  // fitted.toml reads back with the fitted values (written to shortest round trip in lab units,
  // converted back: a few roundings, 1e-12 relative) and runs under `trapwork work`.
  const Scenario fitted = read_scenario(files.scenario.string());
  for (int q = 0; q < 3; ++q) {
    const double value = summary["coefficients"][q]["value_internal"];
    CHECK(fitted.potential.parameter(std::string("trap.") + names[q]) == Approx(value).epsilon(1e-12));
  }
  WorkCommand w;
  w.scenario = files.scenario.string();
  w.output = (dir / "work").string();
  w.quiet = true;
  run_work_command(w, std::cout, std::cout);
  WorkCommand t = w;
  t.scenario = model_file;
  t.output = (dir / "truth").string();
  run_work_command(t, std::cout, std::cout);
  const double fitted_mean = read_json(dir / "work" / "summary.json")["work"]["mean"]["value"];
  const double true_mean = read_json(dir / "truth" / "summary.json")["work"]["mean"]["value"];
  // The anharmonic terms move <W> by 0.13% from the harmonic value (the model's report); fitted to
  // better than 1% of themselves, they leave <W> within 1e-4 relative of the true model's.
  CHECK(fitted_mean == Approx(true_mean).epsilon(1e-4));
}

TEST_CASE("fit keeps the start trap's own linear term in its model", "[fit_command]") {
  // The same physics written two ways: the example lines with their tilts F, and the start trap
  // carrying linear = 2e5 h*Hz/nm with every line's F lowered by as much. The total linear term
  // of each line is the same, so the fitted coefficients must be too. (A finding: the start
  // trap's linear term was left out of the model but kept in fitted.toml, whose spacing then
  // missed the F = 0 line it was fitted to by 180 of its uncertainties.)
  const fs::path dir = scratch("fit-tilt");
  std::istringstream lines(trapwork_test::read_all(examples / "ion_spectroscopy_lines.csv"));
  std::ostringstream shifted;
  std::string line;
  while (std::getline(lines, line)) {
    if (!line.empty() && std::isdigit(static_cast<unsigned char>(line[0]))) {
      std::vector<std::string> f;
      std::stringstream fields(line);
      for (std::string x; std::getline(fields, x, ',');) f.push_back(x);
      REQUIRE(f.size() == 6);
      f[4] = std::to_string(std::stoll(f[4]) - 200000);
      line = f[0] + "," + f[1] + "," + f[2] + "," + f[3] + "," + f[4] + "," + f[5];
    }
    shifted << line << '\n';
  }
  std::ofstream(dir / "shifted_lines.csv") << shifted.str();
  FitCommand c;
  c.data = (examples / "ion_spectroscopy_lines.csv").string();
  c.start = (examples / "ion_spectroscopy_start.toml").string();
  c.terms = "frequency,cubic,quartic";
  c.output = (dir / "plain").string();
  c.quiet = true;
  const auto plain = read_json(run_fit_command(c, std::cout).summary);
  c.data = (dir / "shifted_lines.csv").string();
  c.set = {"trap.linear=2e5 h*Hz/nm"};
  c.output = (dir / "tilted").string();
  const FitResultFiles files = run_fit_command(c, std::cout);
  const auto tilted = read_json(files.summary);
  for (int q = 0; q < 3; ++q) {
    const double a = plain["coefficients"][q]["value_internal"], b = tilted["coefficients"][q]["value_internal"];
    const double sigma = plain["coefficients"][q]["uncertainty_internal"];
    INFO(plain["coefficients"][q]["name"] << ": " << a << " against " << b << " (+- " << sigma << ")");
    CHECK(std::abs(a - b) < 1e-3 * sigma);  // the basis solves each line's own tilt: rounding only
  }
  CHECK(double(tilted["chi_square"]) == Approx(double(plain["chi_square"])).epsilon(1e-4));
  // fitted.toml keeps the tilt it was fitted with
  const Scenario fitted = read_scenario(files.scenario.string());
  CHECK(fitted.potential.parameter("trap.linear") != 0.0);
}

TEST_CASE("fit refuses what the data cannot determine, with exit code 2", "[fit_command]") {
  const fs::path dir = scratch("fit-refusal");
  // Only the lines taken without a tilt: cubic and quartic cannot be told apart.
  std::ifstream in(examples / "ion_spectroscopy_lines.csv");
  std::ofstream out(dir / "untilted.csv");
  for (std::string line; std::getline(in, line);)
    if (line.empty() || line[0] == '#' || line[0] == 'l' || line.find(",0,1") != std::string::npos) out << line << '\n';
  out.close();
  FitCommand c;
  c.data = (dir / "untilted.csv").string();
  c.start = (examples / "ion_spectroscopy_start.toml").string();
  c.terms = "frequency,cubic,quartic";
  c.output = (dir / "out").string();
  c.quiet = true;
  try {
    run_fit_command(c, std::cout);
    FAIL("no exception thrown");
  } catch (const PhysicsError& e) {
    CHECK_THAT(std::string(e.what()), Contains("untilted.csv") && Contains("cubic"));
  }
  CHECK(!fs::exists(dir / "out" / "fitted.toml"));  // nothing written
  CHECK(run_cli({"fit", c.data, "--start", c.start, "--terms", c.terms, "-o", c.output, "--quiet"}) == 2);
  // The same data fix frequency and quartic alone.
  CHECK(run_cli({"fit", c.data, "--start", c.start, "--terms", "quadratic,quartic", "-o", c.output, "--quiet"}) == 0);
  CHECK(fs::exists(dir / "out" / "fitted.toml"));
  // Bad input: exit 2.
  CHECK(run_cli({"fit", c.data, "--start", c.start, "--terms", "quartc", "--quiet"}) == 2);
  CHECK(run_cli({"fit", c.data, "--mass", "40 u", "--quiet"}) == 2);  // no start frequency
  CHECK(run_cli({"fit", (dir / "missing.csv").string(), "--start", c.start, "--quiet"}) == 2);
}

TEST_CASE("compare: data from the model pass, data from another model fail", "[compare_command]") {
  const fs::path dir = scratch("compare");
  CompareCommand c;
  c.scenario = model_file;
  c.data = samples_file;
  c.output = (dir / "same").string();
  c.quiet = true;
  const CompareOutcome same = run_compare_command(c, std::cout, std::cout);
  const WorkComparison& s = same.comparison;
  CHECK(s.runs == 400);
  // Under the model the p-value is uniform: p > 0.01 fails for 1% of data sets. The data
  // file is one such draw (seed 2026) with p = 0.79.
  CHECK(s.chi_square.p_value > 0.01);
  CHECK(s.ks_p_value > 0.01);
  CHECK_THAT(same.verdict, Contains("CONSISTENT"));
  REQUIRE(s.jarzynski);
  // The model's Delta F lies in the data's 90% bootstrap interval (it fails for 10% of data sets).
  CHECK(s.jarzynski->model_with_resolution_kT > s.jarzynski->lower_kT);
  CHECK(s.jarzynski->model_with_resolution_kT < s.jarzynski->upper_kT);
  REQUIRE(s.moments);
  CHECK(std::abs(s.moments->mean - s.moments->model_mean) < 4 * s.moments->mean_error);
  for (const char* f : {"compare.csv", "compare_summary.json", "compare.png", "compare.svg"})
    CHECK(fs::exists(dir / "same" / f));
  const auto summary = read_json(dir / "same" / "compare_summary.json");
  CHECK(summary["resolution"] == Approx(40).epsilon(1e-12));  // from the data file's "# resolution:" line
  CHECK(double(summary["comparison"]["chi_square"]["p_value"]) == s.chi_square.p_value);

  // The same ion moved by 80 nm instead of 60 nm: <W> grows by (80/60)^2, far beyond the data's error.
  const fs::path other = dir / "farther.toml";
  std::ofstream(other) << replace_first(trapwork_test::read_all(model_file), "to = \"60 nm\"", "to = \"80 nm\"");
  c.scenario = other.string();
  c.output = (dir / "other").string();
  const CompareOutcome wrong = run_compare_command(c, std::cout, std::cout);
  CHECK(wrong.comparison.chi_square.p_value < 1e-6);
  CHECK_THAT(wrong.verdict, Contains("INCONSISTENT"));
  CHECK(wrong.comparison.log_likelihood < s.log_likelihood);

  // A histogram of the same samples (250 h*kHz bins) against the right model.
  const WorkSamplesData data = read_work_samples(samples_file);
  const double unit = si::planck_h * 1e3;  // J per h*kHz
  std::map<long, int> counts;
  for (double w : data.work_J) ++counts[long(std::floor(w / unit / 250))];
  std::ofstream hist(dir / "histogram.csv");
  hist << "lower_h_kHz upper_h_kHz count\n# resolution: 40 h*kHz\n";
  for (long k = counts.begin()->first; k <= counts.rbegin()->first; ++k)
    hist << 250 * k << ' ' << 250 * (k + 1) << ' ' << counts[k] << '\n';
  hist.close();
  c.scenario = model_file;
  c.data = (dir / "histogram.csv").string();
  c.output = (dir / "histogram").string();
  const CompareOutcome h = run_compare_command(c, std::cout, std::cout);
  CHECK(h.comparison.runs == 400);
  CHECK(h.comparison.chi_square.p_value > 0.01);
  CHECK(!h.comparison.jarzynski);  // a histogram does not fix exp(-beta W)
  // No run fell beyond the bins: a Poisson count of 0 there has probability exp(-N m_outside),
  // which should not be below 1% (N m_outside < 4.6).
  CHECK(400 * h.comparison.model_mass_outside < 4.6);

  // Without any resolution the command refuses to guess (exit 2).
  std::ofstream(dir / "bare.csv") << "work_h_kHz\n1\n2\n3\n";
  CHECK(run_cli({"compare", model_file, (dir / "bare.csv").string(), "-o", (dir / "bare").string(), "--quiet"}) == 2);
}

TEST_CASE("compare: level pairs drawn from the model pass, levels beyond it name their line", "[compare_command]") {
  const fs::path dir = scratch("compare-pairs");
  const Scenario scenario = read_scenario(model_file);
  const ScenarioWork work = model_work(scenario, std::cout, false);
  const WorkInput& input = work.result().forward;
  // 300 runs drawn from p_m P(m -> n) with a fixed seed.
  std::vector<double> weights;
  const auto& p = input.transitions.probability;
  for (Eigen::Index m = 0; m < p.rows(); ++m)
    for (Eigen::Index n = 0; n < p.cols(); ++n) weights.push_back(input.initial_weights[std::size_t(m)] * p(m, n));
  std::mt19937_64 engine(7);
  std::discrete_distribution<long> cell(weights.begin(), weights.end());
  std::ofstream pairs(dir / "pairs.csv");
  pairs << "initial,final\n";
  for (int i = 0; i < 300; ++i) {
    const long k = cell(engine);
    pairs << k / p.cols() << ',' << k % p.cols() << '\n';
  }
  pairs.close();
  CompareCommand c;
  c.scenario = model_file;
  c.data = (dir / "pairs.csv").string();
  c.output = (dir / "out").string();
  c.quiet = true;
  const CompareOutcome ok = run_compare_command(c, std::cout, std::cout);
  CHECK(ok.comparison.runs == 300);
  CHECK(ok.comparison.chi_square.p_value > 0.01);  // uniform under the model: fails for 1% of seeds
  CHECK_THAT(ok.verdict, Contains("CONSISTENT"));

  // A level the model does not keep names its line (3); a sudden shuttle is a quick model for it.
  const fs::path sudden = dir / "sudden.toml";
  std::ofstream(sudden) << replace_first(trapwork_test::read_all(model_file), "duration = \"0.8 us\"",
                                         "duration = \"0 us\"");
  std::ofstream(dir / "beyond.csv") << "initial final\n0 1\n0 1000\n1 0\n";
  c.scenario = sudden.string();
  c.data = (dir / "beyond.csv").string();
  try {
    run_compare_command(c, std::cout, std::cout);
    FAIL("no exception thrown");
  } catch (const InputError& e) {
    CHECK(e.line == 3);
    CHECK_THAT(std::string(e.what()), Contains("beyond.csv:3") && Contains("final = 1000"));
  }
}

TEST_CASE("plan: table, resolution bias, runs needed and synthetic data", "[plan_command]") {
  const fs::path dir = scratch("plan");
  PlanCommand c;
  c.scenario = model_file;
  c.runs = {20, 200};
  c.resolutions = {"0 h*kHz", "100 h*kHz"};
  c.target_kT = 0.1;
  c.experiments = 400;
  c.seed = 3;
  c.synthetic_runs = 250;
  c.output = dir.string();
  c.quiet = true;
  const PlanOutcome plan = run_plan_command(c, std::cout, std::cout);
  REQUIRE(plan.table.size() == 4);  // resolutions outer, runs inner
  CHECK(plan.table[0].runs == 20);
  CHECK(plan.table[1].runs == 200);
  CHECK(plan.table[0].resolution == 0);
  // -beta^2 sigma^2 / 2 with kT = kB * 30 uK and sigma = 100 h*kHz (exact SI constants).
  const double beta_sigma = 100e3 * si::planck_h / (si::boltzmann * 30e-6);
  CHECK(plan.table[2].resolution_bias_kT == Approx(-beta_sigma * beta_sigma / 2).epsilon(1e-9));
  CHECK(plan.table[0].resolution_bias_kT == 0);
  // More runs, smaller spread: 10x the runs shrinks it by about sqrt(10); at least by 2.
  CHECK(plan.table[1].spread_kT < plan.table[0].spread_kT / 2);
  REQUIRE(plan.needed.size() == 2);
  for (const auto& n : plan.needed) {
    REQUIRE(n);
    CHECK(n->at.rms_error_kT <= 0.1);
  }
  const auto summary = read_json(dir / "plan_summary.json");
  CHECK(summary["runs_needed"][0]["runs"] == plan.needed[0]->runs);
  for (const char* f : {"plan.csv", "plan.png", "plan.svg"}) CHECK(fs::exists(dir / f));

  // The synthetic data read back as work samples, with their resolution.
  const WorkSamplesData data = read_work_samples((dir / "synthetic_work.csv").string());
  CHECK(data.work_J.size() == 250);
  REQUIRE(data.info.resolution_J);
  CHECK(*data.info.resolution_J == 0);  // the first resolution

  // A state that is not thermal has no Jarzynski estimate to plan.
  const fs::path level = dir / "level.toml";
  std::ofstream(level) << replace_first(trapwork_test::read_all(model_file), "temperature = \"30 uK\"", "level = 0");
  c.scenario = level.string();
  c.target_kT.reset();
  CHECK_THROWS_AS(run_plan_command(c, std::cout, std::cout), InputError);
  CHECK(run_cli({"plan", model_file, "--runs", "0", "--quiet"}) == 2);
}

TEST_CASE("plot_comparison draws both files and refuses inconsistent bins", "[plot]") {
  const fs::path dir = scratch("plot");
  ComparisonFigure f;
  f.title = "test";
  f.work_label = "work W (h*kHz)";
  f.edges = {0, 1, 2, 3};
  f.observed = {3, 10, 2};
  f.expected = {4, 9, 2.5};
  const auto files = plot_comparison(dir / "c", f);
  REQUIRE(files.size() == 2);
  for (const auto& p : files) CHECK(fs::file_size(p) > 1000);
  ComparisonFigure bad = f;
  bad.expected = {4, 9};  // one value short
  CHECK_THROWS_AS(plot_comparison(dir / "bad", bad), std::invalid_argument);
  bad = f;
  bad.edges = {0, 2, 1, 3};  // not ascending
  CHECK_THROWS_AS(plot_comparison(dir / "bad", bad), std::invalid_argument);
  bad = f;
  bad.observed = {3, -1, 2};
  CHECK_THROWS_AS(plot_comparison(dir / "bad", bad), std::invalid_argument);
  CHECK(!fs::exists(dir / "bad.png"));
}

TEST_CASE("issue 14: compare refuses to write over its data file, before computing", "[compare_command]") {
  const fs::path dir = scratch("compare-over-input");
  fs::create_directories(dir / "out");
  fs::copy_file(examples / "ion_work_samples.csv", dir / "out" / "compare.csv");
  const std::string before = trapwork_test::read_all(dir / "out" / "compare.csv");
  CompareCommand c;
  c.scenario = model_file;
  c.data = (dir / "out" / "compare.csv").string();
  c.output = (dir / "out").string();
  c.quiet = true;
  try {
    run_compare_command(c, std::cout, std::cout);
    FAIL("compare wrote its result over its data");
  } catch (const InputError& e) {
    CHECK_THAT(std::string(e.what()), Contains("compare.csv here is the data file") && Contains("another folder"));
  }
  CHECK(trapwork_test::read_all(dir / "out" / "compare.csv") == before);  // the measured data, untouched
  CHECK_FALSE(fs::exists(dir / "out" / "compare_summary.json"));
  // the same through the command line, the folder written another way: exit 2
  CHECK(run_cli({"compare", model_file, c.data, "-o", (dir / "out" / "." ).string(), "--quiet"}) == 2);
  CHECK(trapwork_test::read_all(dir / "out" / "compare.csv") == before);
}
