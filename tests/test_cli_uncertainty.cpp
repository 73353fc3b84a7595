// `trapwork work --uncertainty FIT` (issue 19 item 1) as a user runs it: fit the example's
// spectroscopy, carry the fit into work, read the files; a bad calibration exits with 2 and names
// file, line and key.
#include <sys/wait.h>

#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <vector>

#include "scratch_files.hpp"

using Catch::Contains;
namespace fs = std::filesystem;

namespace {
const fs::path binary = fs::path(TRAPWORK_BINARY_DIR) / "trapwork";
const fs::path examples = fs::path(TRAPWORK_SOURCE_DIR) / "examples";

struct Run {
  int exit_code;
  std::string out, err;
};
Run run(const std::string& arguments, const fs::path& dir) {
  const std::string command =
      "cd '" + dir.string() + "' && '" + binary.string() + "' " + arguments + " > stdout.txt 2> stderr.txt";
  const int status = std::system(command.c_str());
  REQUIRE(WIFEXITED(status));
  return {WEXITSTATUS(status), trapwork_test::read_all(dir / "stdout.txt"), trapwork_test::read_all(dir / "stderr.txt")};
}
}  // namespace

TEST_CASE("trapwork work --uncertainty: a fit carried into the work statistics", "[cli][uncertainty]") {
  const fs::path dir = trapwork_test::scratch_dir("test-cli-uncertainty", "fit");
  const Run fit = run("fit '" + (examples / "ion_spectroscopy_lines.csv").string() + "' --start '" +
                          (examples / "ion_spectroscopy_start.toml").string() + "' --terms frequency,cubic,quartic -o fit",
                      dir);
  REQUIRE(fit.exit_code == 0);
  const Run work = run("work fit/fitted.toml --uncertainty fit --uncertainty-method linear -o work", dir);
  INFO(work.err);
  REQUIRE(work.exit_code == 0);
  CHECK_THAT(work.out, Contains("spread due to the trap's calibration"));
  CHECK_THAT(work.out, Contains("trap.quartic"));
  CHECK_THAT(work.out, Contains("not run"));  // sampling was not run: said, not printed as 0
  CHECK_THAT(work.out, Contains("wrote work/lines_uncertainty.csv"));
  const auto summary = nlohmann::json::parse(trapwork_test::read_all(dir / "work" / "summary.json"));
  const auto& u = summary.at("calibration_uncertainty");
  CHECK(u.at("method") == "linear");
  CHECK(u.at("linear_runs") == 7);  // three coefficients: 2 x 3 + 1 runs
  const double sd = u.at("results").at(0).at("sd").get<double>();
  CHECK(sd > 0);
  CHECK(u.at("results").at(0).at("sd_sampled").is_null());
  CHECK(std::isfinite(sd));
}

TEST_CASE("trapwork compare --against --uncertainty: the calibrated model's likelihood averaged over its draws",
          "[cli][uncertainty]") {
  const fs::path dir = trapwork_test::scratch_dir("test-cli-uncertainty", "compare");
  REQUIRE(run("fit '" + (examples / "ion_spectroscopy_lines.csv").string() + "' --start '" +
                  (examples / "ion_spectroscopy_start.toml").string() + "' --terms frequency,cubic,quartic -o fit",
              dir)
              .exit_code == 0);
  const Run compare = run("compare fit/fitted.toml '" + (examples / "ion_work_samples_fine.csv").string() +
                              "' --against '" + (examples / "ion_shuttle_harmonic.toml").string() +
                              "' --calibration 50 --uncertainty fit --uncertainty-samples 8 -o compare",
                          dir);
  INFO(compare.err);
  REQUIRE(compare.exit_code == 0);
  CHECK_THAT(compare.out, Contains("the trap's calibration folded in"));
  const auto summary = nlohmann::json::parse(trapwork_test::read_all(dir / "compare" / "compare_summary.json"));
  const auto& models = summary.at("calibration_uncertainty").at("models");
  REQUIRE(models.size() == 2);
  // the fitted model is folded: its marginal ln L is finite and differs from the nominal one
  CHECK(models[0].at("not_folded").is_null());
  const double nominal = models[0].at("log_likelihood_nominal"), marginal = models[0].at("log_likelihood_marginal");
  CHECK(std::isfinite(marginal));
  CHECK(marginal != nominal);
  CHECK(models[0].at("log_likelihood_sd_over_draws").get<double>() > 0);
  // the harmonic model is another hypothesis (quartic 0, not the fitted value): not folded, said so
  CHECK(models[1].at("not_folded").is_string());
  CHECK(models[1].at("log_likelihood_marginal").is_null());
  CHECK(models[0].at("posterior").get<double>() + models[1].at("posterior").get<double>() == Approx(1.0));
}

TEST_CASE("issue 19: trapwork compare folds in each model's own [uncertainty] table", "[cli][uncertainty]") {
  const fs::path dir = trapwork_test::scratch_dir("test-cli-uncertainty", "compare-table");
  std::ofstream(dir / "model.toml") << trapwork_test::read_all(examples / "ion_shuttle_model.toml")
                                    << "\n[uncertainty.sd]\n\"trap.frequency\" = \"0.4 kHz\"\n";
  const std::string data = "'" + (examples / "ion_work_samples_fine.csv").string() + "'";
  const std::string against = " --against '" + (examples / "ion_shuttle_harmonic.toml").string() + "'";
  const Run compare = run("compare model.toml " + data + against + " --calibration 0 --uncertainty-samples 4 -o c", dir);
  INFO(compare.err);
  REQUIRE(compare.exit_code == 0);
  const auto summary = nlohmann::json::parse(trapwork_test::read_all(dir / "c" / "compare_summary.json"));
  const auto& models = summary.at("calibration_uncertainty").at("models");
  REQUIRE(models.size() == 2);
  CHECK(models[0].at("not_folded").is_null());  // the table's frequency spread, folded
  CHECK(std::isfinite(models[0].at("log_likelihood_marginal").get<double>()));
  CHECK(models[0].at("log_likelihood_sd_over_draws").get<double>() > 0);
  // the harmonic model has no table: not folded, and the reason says so
  CHECK_THAT(models[1].at("not_folded").get<std::string>(), Contains("no [uncertainty] table"));
  // --uncertainty none leaves the table out; a fit's file beside the table is refused
  REQUIRE(run("compare model.toml " + data + " --uncertainty none -o none", dir).exit_code == 0);
  CHECK_FALSE(nlohmann::json::parse(trapwork_test::read_all(dir / "none" / "compare_summary.json"))
                  .contains("calibration_uncertainty"));
  const Run both = run("compare model.toml " + data + " --uncertainty fit_summary.json -o both", dir);
  CHECK(both.exit_code == 2);
  CHECK_THAT(both.err, Contains("[uncertainty]"));
  CHECK_FALSE(fs::exists(dir / "both"));
}

TEST_CASE("trapwork work --uncertainty refuses a calibration that does not fit the scenario", "[cli][uncertainty]") {
  const fs::path dir = trapwork_test::scratch_dir("test-cli-uncertainty", "bad");
  std::ofstream(dir / "fit_summary.json") << "{\n  \"command\": \"fit\",\n  \"coefficients\": [\n    {\n"
                                             "      \"name\": \"width\",\n      \"unit\": \"nm\",\n"
                                             "      \"value\": 1,\n      \"uncertainty\": 0.1\n    }\n  ],\n"
                                             "  \"correlation\": [[1]]\n}\n";
  const std::string scenario = "'" + (examples / "ion_spectroscopy_start.toml").string() + "'";
  const Run bad = run("work " + scenario + " --uncertainty fit_summary.json -o out", dir);
  CHECK(bad.exit_code == 2);
  CHECK_THAT(bad.err, Contains("fit_summary.json:3"));
  CHECK_THAT(bad.err, Contains("coefficients"));
  CHECK_FALSE(fs::exists(dir / "out" / "summary.json"));  // refused before the run
  const Run missing = run("work " + scenario + " --uncertainty nothing.json -o out", dir);
  CHECK(missing.exit_code == 2);
  CHECK_THAT(missing.err, Contains("nothing.json"));
}

namespace {
// A CSV file's column `name` (header on line 1, '#' comment lines skipped).
std::vector<double> csv_column(const fs::path& file, const std::string& name) {
  std::istringstream in(trapwork_test::read_all(file));
  std::string line;
  std::getline(in, line);
  std::vector<std::string> header;
  std::stringstream h(line);
  for (std::string cell; std::getline(h, cell, ',');) header.push_back(cell);
  const auto at = std::find(header.begin(), header.end(), name);
  REQUIRE(at != header.end());
  std::vector<double> out;
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    std::stringstream cells(line);
    std::string cell;
    for (auto k = header.begin(); k <= at; ++k) std::getline(cells, cell, ',');
    out.push_back(std::strtod(cell.c_str(), nullptr));
  }
  return out;
}

// The harmonic shuttle of test_uncertainty.cpp, its frequency known to 1 kHz, over two durations.
const std::string calibrated_sweep_text = R"(title = "calibrated sweep"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "1.3 us"
[[protocol.change]]
parameter = "trap.centre"
to = "30 nm"
[initial]
mean_phonons = 0.5
[work]
time_step_check = false
[uncertainty.sd]
"trap.frequency" = "1 kHz"
[sweep]
parameter = "protocol.duration"
values = ["1.2 us", "1.3 us"]
)";
}  // namespace

TEST_CASE("issue 19: trapwork sweep with [uncertainty]: the calibration's sd per point and a band in sweep.png",
          "[cli][uncertainty][sweep]") {
  const fs::path dir = trapwork_test::scratch_dir("test-cli-uncertainty", "sweep");
  std::ofstream(dir / "s.toml") << calibrated_sweep_text;
  const Run sweep = run("sweep s.toml --jobs 1 -o sweep", dir);
  INFO(sweep.err);
  REQUIRE(sweep.exit_code == 0);
  const fs::path csv = dir / "sweep" / "sweep.csv";
  const auto sd_mean = csv_column(csv, "mean_work_calibration_sd_h_kHz");
  const auto method = csv_column(csv, "calibration_method");
  const auto check = csv_column(csv, "calibration_linear_minus_sampled_se");
  REQUIRE(sd_mean.size() == 2);
  for (std::size_t i = 0; i < 2; ++i) {
    CHECK(sd_mean[i] > 0);
    CHECK(method[i] == 1);          // linear (2 runs per point for one parameter)
    CHECK(std::isnan(check[i]));    // no sampling check in a sweep unless asked: nan, not 0
  }
  CHECK(csv_column(csv, "sd_work_calibration_sd_h_kHz")[0] > 0);
  // Against the displaced oscillator's closed form (Husimi 1953, from memory; test_uncertainty.cpp):
  // <W> = 2 m v^2 sin^2(omega tau / 2), so sd<W> = m v^2 tau |sin(omega tau)| sd(omega), with m v^2
  // from each point's own <W>; omega = 2 pi rad/us, sd(omega) = 2 pi 1e-3 rad/us. Tolerance 2e-3 as
  // there (the central difference over +-1 sd).
  const auto tau = csv_column(csv, "protocol_duration_us"), mean = csv_column(csv, "mean_work_h_kHz");
  const double omega = 2 * M_PI, sd_omega = 2 * M_PI * 1e-3;
  for (std::size_t i = 0; i < 2; ++i) {
    const double m_v2 = mean[i] / (2 * std::pow(std::sin(omega * tau[i] / 2), 2));
    CHECK(sd_mean[i] == Approx(m_v2 * tau[i] * std::abs(std::sin(omega * tau[i])) * sd_omega).epsilon(2e-3));
  }
  CHECK_THAT(trapwork_test::read_all(csv), Contains("calibration_method: 1 linear propagation"));
  CHECK_THAT(sweep.out, Contains("calibration sd of <W>"));
  CHECK_THAT(sweep.out, Contains("(linear)"));
  CHECK(fs::file_size(dir / "sweep" / "sweep.png") > 0);
  // The point at 1.3 us is `trapwork work` on the scenario at that duration: the same sd, up to
  // the FFTW plans of two processes (rounding, lifted by the difference quotient to ~1e-10).
  // Linear asked for: auto would add its check against 100 sampled runs (test_uncertainty.cpp
  // covers that choice), 20 of this case's 25 seconds.
  std::string work_text = calibrated_sweep_text.substr(0, calibrated_sweep_text.find("[sweep]"));
  std::ofstream(dir / "w.toml") << work_text;
  const Run work = run("work w.toml -o work --uncertainty-method linear", dir);
  REQUIRE(work.exit_code == 0);
  const auto summary = nlohmann::json::parse(trapwork_test::read_all(dir / "work" / "summary.json"));
  const auto& u = summary.at("calibration_uncertainty");
  CHECK(u.at("method") == "linear");
  CHECK(u.at("file") == "w.toml [uncertainty]");
  CHECK(u.at("results").at(0).at("sd").get<double>() == Approx(sd_mean[1]).epsilon(1e-6));
  // --uncertainty FILE beside the table: refused, nothing computed.
  std::ofstream(dir / "fit_summary.json") << "{\"command\": \"fit\", \"coefficients\": [{\"name\": \"frequency\", "
                                             "\"unit\": \"MHz\", \"value\": 1, \"uncertainty\": 0.001}], "
                                             "\"correlation\": [[1]]}";
  const Run both = run("sweep s.toml --uncertainty fit_summary.json -o both", dir);
  CHECK(both.exit_code == 2);
  CHECK_THAT(both.err, Contains("[uncertainty] table"));
  CHECK_FALSE(fs::exists(dir / "both" / "sweep.csv"));
}
