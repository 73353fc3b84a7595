// `trapwork work --uncertainty FIT` (issue 19 item 1) as a user runs it: fit the example's
// spectroscopy, carry the fit into work, read the files; a bad calibration exits with 2 and names
// file, line and key.
#include <sys/wait.h>

#include <catch2/catch.hpp>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

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
