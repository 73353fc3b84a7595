// Issue 19 items 1 and 5: the calibration's uncertainty carried forward (solver/uncertainty.hpp,
// solver/scenario/uncertainty_task.hpp). Linear propagation against sampling where both are
// accurate, against the closed-form derivative of the displaced oscillator's <W>, and the
// coverage of the 1-sigma band over repeated synthetic calibrations.
#include <catch2/catch.hpp>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <random>

#include "scratch_files.hpp"
#include "solver/compare.hpp"
#include "solver/errors.hpp"
#include "solver/fit.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/uncertainty.hpp"
#include "solver/units.hpp"

using namespace trapwork;
using Catch::Contains;
namespace fs = std::filesystem;

namespace {

// Mean work of a harmonic trap (angular frequency omega) moved at constant speed v over tau:
// <W> = 2 m v^2 sin^2(omega tau / 2), at any temperature (displaced oscillator; Husimi 1953;
// Talkner, Burada and Hanggi 2008; DESIGN.md), and its derivative in omega,
// d<W>/d omega = m v^2 tau sin(omega tau).
double displaced_mean_work(double m, double v, double tau, double omega) {
  return 2 * m * v * v * std::pow(std::sin(omega * tau / 2), 2);
}
double displaced_mean_work_slope(double m, double v, double tau, double omega) {
  return m * v * v * tau * std::sin(omega * tau);
}

Eigen::VectorXd one(double x) { return Eigen::VectorXd::Constant(1, x); }
Eigen::MatrixXd variance(double sd) { return Eigen::MatrixXd::Constant(1, 1, sd * sd); }

}  // namespace

TEST_CASE("linear propagation is exact for a linear map and matches sampling", "[uncertainty]") {
  // f(p) = A p: var = A C A^T exactly (first order is all there is).
  Eigen::MatrixXd a(2, 2);
  a << 1.0, 2.0, -0.5, 3.0;
  Eigen::MatrixXd c(2, 2);
  c << 0.04, 0.018, 0.018, 0.09;
  const Eigen::VectorXd mean = Eigen::Vector2d(1.0, -2.0);
  const ResultFunction f = [&](const Eigen::VectorXd& p) { return Eigen::VectorXd(a * p); };
  const LinearSpread lin = linear_spread(f, mean, c);
  const Eigen::MatrixXd exact = a * c * a.transpose();
  CHECK(lin.runs == 5);
  CHECK(lin.accurate);
  CHECK(lin.sd(0) == Approx(std::sqrt(exact(0, 0))).epsilon(1e-12));
  CHECK(lin.sd(1) == Approx(std::sqrt(exact(1, 1))).epsilon(1e-12));
  CHECK(lin.curvature_sd.cwiseAbs().maxCoeff() < 1e-12);
  // 20000 draws: the sampled sd within 4 of its standard errors (sd / sqrt(2 (N - 1)), 0.5 %)
  const SampledSpread s = sampled_spread(f, mean, c, 20000, 7);
  for (int i = 0; i < 2; ++i) {
    CHECK(std::abs(s.sd(i) - lin.sd(i)) < 4 * s.sd_error(i));
    CHECK(std::abs(s.mean(i) - lin.nominal(i)) < 4 * s.sd(i) / std::sqrt(20000.0));
  }
  const SpreadAgreement agree = compare_spreads(lin, s);
  CHECK(agree.largest_in_standard_errors < 4);
  // seeded: the same draws again
  CHECK(sampled_spread(f, mean, c, 50, 7).values == sampled_spread(f, mean, c, 50, 7).values);
  CHECK(sampled_spread(f, mean, c, 50, 8).values != sampled_spread(f, mean, c, 50, 7).values);
}

TEST_CASE("the linear route flags a result its second-order terms dominate", "[uncertainty]") {
  // f(p) = p^2 at p = 0 with sd s: the slope is 0 but sd f = sqrt(2) s^2 (chi-square with one
  // degree of freedom times s^2): linear says 0 and must say it is not accurate.
  const double s = 0.3;
  const ResultFunction f = [](const Eigen::VectorXd& p) { return one(p(0) * p(0)); };
  const LinearSpread lin = linear_spread(f, one(0.0), variance(s));
  CHECK(lin.sd(0) == Approx(0).margin(1e-15));
  CHECK(lin.curvature_sd(0) == Approx(std::sqrt(2.0) * s * s).epsilon(1e-12));
  CHECK(lin.bias(0) == Approx(s * s).epsilon(1e-12));
  CHECK_FALSE(lin.accurate);
  const SampledSpread sampled = sampled_spread(f, one(0.0), variance(s), 4000, 3);
  CHECK(std::abs(sampled.sd(0) - std::sqrt(2.0) * s * s) < 4 * sampled.sd_error(0) * 2);  // chi^2_1: heavier tail
  // Far from the minimum the same f is nearly linear: accurate.
  CHECK(linear_spread(f, one(10.0), variance(s)).accurate);
}

TEST_CASE("a bad covariance is refused", "[uncertainty]") {
  const ResultFunction f = [](const Eigen::VectorXd& p) { return one(p.sum()); };
  Eigen::MatrixXd c(2, 2);
  c << 1.0, 2.0, 2.0, 1.0;  // eigenvalues 3 and -1
  try {
    linear_spread(f, Eigen::Vector2d(0, 0), c);
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.key == "covariance");
    CHECK_THAT(std::string(e.what()), Contains("positive semi-definite"));
  }
  CHECK_THROWS_AS(sampled_spread(f, Eigen::Vector2d(0, 0), c, 10, 1), InputError);
  CHECK_THROWS_AS(linear_spread(f, one(0), Eigen::MatrixXd::Identity(2, 2)), InputError);
  CHECK_THROWS_AS(sampled_spread(f, one(0), variance(1), 1, 1), InputError);
}

TEST_CASE("linear propagation of the displaced oscillator's <W> meets its closed-form derivative",
          "[uncertainty]") {
  // Internal units m = 1: omega = 1 +- 1e-3, v = 0.2, tau = 2.6 pi (sin(omega tau) = 0.95).
  const double v = 0.2, tau = 2.6 * si::pi, sd = 1e-3;
  const ResultFunction f = [&](const Eigen::VectorXd& p) { return one(displaced_mean_work(1, v, tau, p(0))); };
  const LinearSpread lin = linear_spread(f, one(1.0), variance(sd));
  const double exact = std::abs(displaced_mean_work_slope(1, v, tau, 1.0)) * sd;
  // central difference error f''' h^2 / 6 relative to f' h: ~(tau sd)^2 ~ 7e-5
  CHECK(lin.sd(0) == Approx(exact).epsilon(2e-4));
  CHECK(lin.accurate);
  const SampledSpread sampled = sampled_spread(f, one(1.0), variance(sd), 20000, 11);
  CHECK(std::abs(sampled.sd(0) - exact) < 4 * sampled.sd_error(0));
}

TEST_CASE("issue 19: the 1-sigma band of a fitted trap covers the true <W> about 68 % of the time",
          "[uncertainty][coverage]") {
  // Synthetic calibrations: a harmonic trap of true omega = 1 (internal units), transitions 0-1,
  // 1-2, 0-2 measured with uncertainty sigma = 2e-4 (ordinary frequency) and normal noise of that
  // size; each data set is fitted (fit_trap, frequency only) and the fit's covariance propagated
  // to <W> of a translation (closed form above); the true <W> must fall within +-1 sd of the
  // fitted <W> in 68.27 % of the calibrations (normal: the band is exact to first order),
  // checked within 3 binomial standard errors.
  const double truth = 1.0, sigma = 2e-4, v = 0.2, tau = 2.6 * si::pi;
  const int repetitions = 400;
  std::mt19937_64 engine(2026);
  PolynomialTrap true_trap;
  true_trap.omega = truth;
  const Eigen::VectorXd levels = trap_levels(true_trap, 0, 3);
  const double w_true = displaced_mean_work(1, v, tau, truth);
  int inside = 0;
  for (int r = 0; r < repetitions; ++r) {
    std::vector<TransitionDatum> data;
    for (auto [lo, hi] : {std::pair{0, 1}, std::pair{1, 2}, std::pair{0, 2}}) {
      const double nu = (levels(hi) - levels(lo)) / (2 * si::pi);
      data.push_back({lo, hi, nu + sigma * standard_normal(engine), sigma, 0});
    }
    PolynomialTrap start;
    start.omega = 1.01;
    const TrapFit fit = fit_trap(data, start, {TrapCoefficient::frequency});
    const ResultFunction f = [&](const Eigen::VectorXd& p) { return one(displaced_mean_work(1, v, tau, p(0))); };
    const LinearSpread lin = linear_spread(f, fit.value, fit.covariance);
    REQUIRE(lin.accurate);
    if (std::abs(lin.nominal(0) - w_true) <= lin.sd(0)) ++inside;
  }
  const double coverage = double(inside) / repetitions, expected = 0.6827;
  const double binomial = std::sqrt(expected * (1 - expected) / repetitions);
  INFO("coverage " << coverage << " over " << repetitions << " calibrations, binomial sd " << binomial);
  CHECK(std::abs(coverage - expected) < 3 * binomial);
  WARN("coverage of the 1-sigma band: " << inside << " of " << repetitions << " = " << coverage << " (expected "
                                         << expected << " +- " << binomial << ")");
}

namespace {

// A harmonic 40 u ion, 1 MHz, moved by 30 nm in 1.3 us (omega tau = 2.6 pi), 0.5 phonons.
const std::string harmonic_text = R"(title = "harmonic shuttle"
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
)";

// A fit_summary.json as `trapwork fit` writes it (the keys read), for the frequency alone or with
// a second coefficient.
std::string summary_text(const std::string& coefficients, const std::string& correlation) {
  return "{\n  \"command\": \"fit\",\n  \"coefficients\": [\n" + coefficients + "\n  ],\n  \"correlation\": " +
         correlation + "\n}\n";
}
std::string coefficient(const std::string& name, const std::string& unit, double value, double sd) {
  return "    {\n      \"name\": \"" + name + "\",\n      \"unit\": \"" + unit + "\",\n      \"value\": " +
         std::to_string(value) + ",\n      \"uncertainty\": " + std::to_string(sd) + "\n    }";
}
fs::path write_file(const std::string& area, const std::string& text) {
  const fs::path dir = trapwork_test::scratch_dir("test-uncertainty", area);
  std::ofstream(dir / "fit_summary.json") << text;
  return dir / "fit_summary.json";
}

// d<W>/d nu sd for the harmonic scenario in internal units (omega in internal angular units).
double harmonic_sd(const Scenario& s, double sd_MHz) {
  const double omega = s.potential.parameter("trap.frequency");
  const double per_MHz = omega;  // the scenario's 1 MHz is omega internal
  const double tau = s.protocol->duration;
  const double distance = s.units.to_internal(parse_quantity("30 nm"), Dimension::length(), "", "");
  return std::abs(displaced_mean_work_slope(1, distance / tau, tau, omega)) * sd_MHz * per_MHz;
}

}  // namespace

TEST_CASE("work --uncertainty on a harmonic shuttle: the linear sd of <W> is the closed form's", "[uncertainty]") {
  const Scenario s = read_scenario_text(harmonic_text, "harmonic.toml");
  const fs::path file = write_file("linear", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3), "[[1.0]]"));
  WorkOutcome o = work_task(s, std::nullopt);
  UncertaintySettings settings;
  settings.calibration = file.string();
  settings.method = "linear";
  add_work_uncertainty(o, settings, {});
  REQUIRE(o.uncertainty);
  const WorkUncertainty& u = *o.uncertainty;
  CHECK(u.runs == 3);
  CHECK(u.method == "linear");
  REQUIRE(u.linear);
  CHECK(u.linear->accurate);
  // the run's <W> itself agrees with the closed form to its own numerical accuracy (~1e-6 relative
  // is what test_work checks); its derivative to the central difference's error (~1e-4)
  CHECK(u.results[0].sd == Approx(harmonic_sd(s, 1e-3)).epsilon(2e-3));
  // Delta F of a translation is 0: its spread is rounding noise, said so
  CHECK(std::abs(u.results[2].value) < 1e-9);
  CHECK_FALSE(u.results[2].sd > u.results[2].floor);
  // The files: the lines with their sd, the summary part, the bars.
  const auto tables = task_tables(o);
  REQUIRE(tables.back().file == "lines_uncertainty.csv");
  CHECK(tables.back().table.columns[2].values.size() == u.lines.size());
  const auto summary = task_summary(o);
  CHECK(summary["calibration_uncertainty"]["method"] == "linear");
  CHECK(summary["calibration_uncertainty"]["results"][2]["sd_at_rounding_floor"] == true);
  CHECK(summary["calibration_uncertainty"]["results"][0]["sd_at_rounding_floor"] == false);
  CHECK(summary["calibration_uncertainty"]["results"][0]["sd_sampled"].is_null());  // not run: null, not 0
  std::ostringstream report;
  print_task_report(report, o);
  CHECK_THAT(report.str(), Contains("spread due to the trap's calibration"));
  CHECK_THAT(report.str(), Contains("not run"));
}

TEST_CASE("work --uncertainty auto: the check against sampling is chosen by counted arithmetic, not by time",
          "[uncertainty]") {
  // The choice must not depend on the machine's load: the command line and the Python module
  // (or two runs under different load) must write the same files.
  const Scenario s = read_scenario_text(harmonic_text, "harmonic.toml");
  const fs::path file = write_file("auto", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3), "[[1.0]]"));
  const WorkOutcome nominal = work_task(s, std::nullopt);
  UncertaintySettings settings;
  settings.calibration = file.string();
  settings.samples = 6;
  auto with_limit = [&](double limit) {
    WorkOutcome o = nominal;
    settings.check_operations = limit;
    add_work_uncertainty(o, settings, {});
    REQUIRE(o.uncertainty);
    return *o.uncertainty;
  };
  const WorkUncertainty first = with_limit(0);
  REQUIRE(first.linear);
  REQUIRE(first.linear->accurate);
  CHECK_FALSE(first.sampled);
  CHECK(first.runs == 3);
  CHECK_THAT(first.reason, Contains("not checked against sampling (6 runs of about"));
  // the estimate: 6 forward runs at the nominal steps, points and kept states, each at least its
  // propagation's arithmetic (steps x columns x two transforms)
  const WorkResult& r = nominal.direct ? nominal.direct->result() : nominal.choice->work->result();
  const double n = double(r.grid.size());
  REQUIRE(std::isfinite(first.check_estimate));
  CHECK(first.check_estimate >= 6 * double(r.steps) * double(r.forward.initial_weights.size()) * 10 * n * std::log2(n));
  // at exactly the estimate the check runs; just below, it does not (the same estimate both times)
  const WorkUncertainty at = with_limit(first.check_estimate);
  CHECK(at.check_estimate == first.check_estimate);
  REQUIRE(at.sampled);
  CHECK(at.runs == 3 + 6);
  CHECK_THAT(at.reason, Contains("checked against sampling (a small case: 6 runs of about"));
  const WorkUncertainty below = with_limit(first.check_estimate * (1 - 1e-9));
  CHECK_FALSE(below.sampled);
  CHECK(below.check_estimate == first.check_estimate);
}

TEST_CASE("work --uncertainty: linear against sampling through whole runs where both are accurate",
          "[uncertainty][heavy]") {
  const Scenario s = read_scenario_text(harmonic_text, "harmonic.toml");
  const fs::path file = write_file("both", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3), "[[1.0]]"));
  WorkOutcome o = work_task(s, std::nullopt);
  UncertaintySettings settings;
  settings.calibration = file.string();
  settings.method = "both";
  settings.samples = 60;
  add_work_uncertainty(o, settings, {});
  const WorkUncertainty& u = *o.uncertainty;
  REQUIRE(u.linear);
  REQUIRE(u.sampled);
  REQUIRE(u.agreement);
  CHECK(u.runs == 63);
  // the sampled sd of <W> and of every strong line within 4 of its standard errors of the linear one
  CHECK(std::abs(u.sampled->sd(0) - harmonic_sd(s, 1e-3)) < 4 * u.sampled->sd_error(0));
  CHECK(u.agreement->largest_in_standard_errors < 4);
  WARN("harmonic shuttle, 60 samples: largest linear-sampled difference "
       << u.agreement->largest_in_standard_errors << " standard errors; sd<W> linear " << u.linear->sd(0)
       << ", sampled " << u.sampled->sd(0) << ", closed form " << harmonic_sd(s, 1e-3));
}

TEST_CASE("a calibration file that does not fit the scenario names file, line and key", "[uncertainty]") {
  const Scenario s = read_scenario_text(trapwork_test::small_shuttle_text, "shuttle.toml");
  auto refusal = [&](const fs::path& file) -> InputError {
    try {
      (void)read_calibration(file.string(), s);
    } catch (const InputError& e) {
      return e;
    }
    FAIL("no error");
    return InputError("", "", "");
  };
  {  // a missing file
    const InputError e = refusal(trapwork_test::scratch_dir("test-uncertainty", "missing") / "nothing.json");
    CHECK_THAT(std::string(e.what()), Contains("nothing.json"));
  }
  {  // a coefficient the scenario's trap does not have
    const fs::path f = write_file("name", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3) + ",\n" +
                                                           coefficient("trap.quartc", "h*Hz/nm^4", 0, 1e-6),
                                                       "[[1, 0], [0, 1]]"));
    const InputError e = refusal(f);
    CHECK(e.file == f.string());
    CHECK(e.key == "coefficients[1].name");
    CHECK(e.line == 11);  // the second coefficient's name
    CHECK(e.suggestion == "trap.quartic");
  }
  {  // a correlation that is no covariance (eigenvalue < 0)
    const fs::path f =
        write_file("psd", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3) + ",\n" +
                                           coefficient("quartic", "h*Hz/nm^4", 0.01, 1e-4),
                                       "[[1, 1.5], [1.5, 1]]"));
    const InputError e = refusal(f);
    CHECK(e.key == "correlation[0][1]");
    CHECK(e.line == 17);  // "correlation": ...
    const fs::path g = write_file("psd3", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3) + ",\n" +
                                                           coefficient("quartic", "h*Hz/nm^4", 0.01, 1e-4) + ",\n" +
                                                           coefficient("cubic", "h*Hz/nm^3", 0, 1e-3),
                                                       "[[1, 0.9, 0.9], [0.9, 1, -0.9], [0.9, -0.9, 1]]"));
    const InputError h = refusal(g);
    CHECK(h.key == "correlation");
    CHECK_THAT(std::string(h.what()), Contains("positive semi-definite"));
    const fs::path c = write_file("moved", summary_text(coefficient("centre", "nm", 0, 1), "[[1]]"));
    const InputError moved = refusal(c);  // the protocol changes trap.centre
    CHECK(moved.key == "coefficients[0].name");
    CHECK_THAT(std::string(moved.what()), Contains("holds fixed"));
  }
  {  // positive semi-definiteness on its own
    const Scenario two = read_scenario_text(harmonic_text, "harmonic.toml");
    const fs::path f = write_file("psd2", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3) + ",\n" +
                                                           coefficient("frequency", "MHz", 1.0, 1e-3),
                                                       "[[1, 0.5], [0.5, 1]]"));
    CHECK_THROWS_WITH(read_calibration(f.string(), two), Contains("each coefficient once"));
  }
}

namespace {
// The error `text` (a scenario) is refused with ("" when it reads).
InputError scenario_refusal(const std::string& text) {
  try {
    (void)read_scenario_text(text, "table.toml");
  } catch (const InputError& e) {
    return e;
  }
  FAIL("no error for\n" << text);
  return InputError("", "", "");
}
}  // namespace

TEST_CASE("issue 19: [uncertainty] in the scenario gives the spread the same calibration as a fit file gives",
          "[uncertainty]") {
  // The harmonic shuttle's frequency known to 1 kHz: written in the scenario, and as a fit file.
  const Scenario table = read_scenario_text(harmonic_text + "[uncertainty.sd]\n\"trap.frequency\" = \"1 kHz\"\n",
                                            "harmonic.toml");
  REQUIRE(table.uncertainty);
  CHECK(table.uncertainty->units == std::vector<std::string>{"kHz"});
  UncertaintySettings settings;
  settings.method = "linear";
  CHECK(has_calibration(table, settings));
  WorkOutcome o = work_task(table, std::nullopt);
  add_work_uncertainty(o, settings, {});
  REQUIRE(o.uncertainty);
  const WorkUncertainty& u = *o.uncertainty;
  CHECK(u.runs == 3);
  CHECK(u.method == "linear");
  CHECK(u.calibration.file == "harmonic.toml [uncertainty]");
  CHECK(u.results[0].sd == Approx(harmonic_sd(table, 1e-3)).epsilon(2e-3));  // tolerance as in the fit-file case above

  const Scenario plain = read_scenario_text(harmonic_text, "harmonic.toml");
  WorkOutcome f = work_task(plain, std::nullopt);
  UncertaintySettings from_file = settings;
  from_file.calibration = write_file("table", summary_text(coefficient("frequency", "MHz", 1.0, 1e-3), "[[1.0]]")).string();
  add_work_uncertainty(f, from_file, {});
  REQUIRE(f.uncertainty);
  // The same runs up to the rounding of 1 kHz in internal units (1e-16 relative), which the
  // runs' difference quotient lifts to ~1e-10 of the sd: equal to 1e-8.
  for (std::size_t i = 0; i < u.results.size(); ++i) {
    INFO(u.results[i].name);
    if (u.results[i].sd > u.results[i].floor) CHECK(u.results[i].sd == Approx(f.uncertainty->results[i].sd).epsilon(1e-8));
  }
  // The summary says where the calibration came from.
  CHECK(task_summary(o)["calibration_uncertainty"]["file"] == "harmonic.toml [uncertainty]");
  CHECK(task_summary(o)["calibration_uncertainty"]["parameters"][0]["unit"] == "kHz");
  CHECK(task_summary(o)["calibration_uncertainty"]["parameters"][0]["sd"].get<double>() == Approx(1.0));

  // Both given: refused, naming the table's line; "none" leaves the table out.
  try {
    (void)calibration_of(table, from_file);
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.key == "--uncertainty");
    CHECK_THAT(std::string(e.what()), Contains("harmonic.toml has an [uncertainty] table"));
  }
  settings.calibration = "none";
  CHECK_FALSE(has_calibration(table, settings));
  WorkOutcome off = work_task(table, std::nullopt);
  add_work_uncertainty(off, settings, {});
  CHECK_FALSE(off.uncertainty);
}

TEST_CASE("issue 19: a bad [uncertainty] table names file, line and key", "[uncertainty]") {
  const std::string base = trapwork_test::small_shuttle_text + "[uncertainty]\n";
  {  // a parameter the trap does not have, with a suggestion
    const InputError e = scenario_refusal(base + "[uncertainty.sd]\n\"trap.quartc\" = \"1e-4 h*Hz/nm^4\"\n");
    CHECK(e.file == "table.toml");
    CHECK(e.line == 20);  // 17 lines of the shuttle, [uncertainty], [uncertainty.sd], the entry
    CHECK(e.key == "uncertainty.sd.\"trap.quartc\"");
    CHECK(e.suggestion == "trap.quartic");
  }
  {  // a bare number: no unit
    const InputError e = scenario_refusal(base + "[uncertainty.sd]\n\"trap.frequency\" = 400\n");
    CHECK(e.key == "uncertainty.sd.\"trap.frequency\"");
    CHECK_THAT(std::string(e.what()), Contains("with its unit"));
  }
  {  // a negative standard deviation
    const InputError e = scenario_refusal(base + "[uncertainty.sd]\n\"trap.frequency\" = \"-0.4 kHz\"\n");
    CHECK_THAT(std::string(e.what()), Contains("a standard deviation > 0"));
  }
  {  // the protocol changes the centre: its schedule's uncertainty is not carried
    const InputError e = scenario_refusal(base + "[uncertainty.sd]\n\"trap.centre\" = \"1 nm\"\n");
    CHECK_THAT(std::string(e.what()), Contains("holds fixed"));
  }
  {  // no sd at all
    const InputError e = scenario_refusal(base);
    CHECK(e.key == "uncertainty.sd");
  }
  const std::string two = base + "correlation = CORR\n[uncertainty.sd]\n\"trap.frequency\" = \"0.4 kHz\"\n"
                                 "\"trap.quartic\" = \"1e-4 h*Hz/nm^4\"\n\"trap.cubic\" = \"1e-3 h*Hz/nm^3\"\n";
  auto with = [&](const std::string& correlation) {
    std::string t = two;
    t.replace(t.find("CORR"), 4, correlation);
    return t;
  };
  {  // |r| > 1
    const InputError e = scenario_refusal(with("[[\"trap.frequency\", \"trap.quartic\", 1.5]]"));
    CHECK(e.key == "uncertainty.correlation[1]");
    CHECK(e.line == 19);  // correlation = ... after [uncertainty]
  }
  {  // a name not in [uncertainty.sd]
    const InputError e = scenario_refusal(with("[[\"trap.frequency\", \"trap.quartik\", 0.5]]"));
    CHECK(e.suggestion == "trap.quartic");
  }
  {  // each |r| <= 1, but together no covariance (an eigenvalue < 0)
    const InputError e = scenario_refusal(with("[[\"trap.frequency\", \"trap.quartic\", 0.9], "
                                               "[\"trap.frequency\", \"trap.cubic\", 0.9], "
                                               "[\"trap.quartic\", \"trap.cubic\", -0.9]]"));
    CHECK(e.key == "uncertainty.correlation");
    CHECK_THAT(std::string(e.what()), Contains("positive semi-definite"));
  }
  {  // a valid table, the unquoted (nested) form, in file order, with its correlations
    const Scenario s = read_scenario_text(with("[[\"trap.quartic\", \"trap.frequency\", -0.6]]"), "table.toml");
    REQUIRE(s.uncertainty);
    CHECK(s.uncertainty->addresses == std::vector<std::string>{"trap.frequency", "trap.quartic", "trap.cubic"});
    CHECK(s.uncertainty->correlation[0][1] == -0.6);
    CHECK(s.uncertainty->correlation[1][0] == -0.6);
    CHECK(s.uncertainty->correlation[0][2] == 0);
    const Scenario nested = read_scenario_text(base + "[uncertainty.sd]\ntrap.frequency = \"0.4 kHz\"\n", "table.toml");
    REQUIRE(nested.uncertainty);
    CHECK(nested.uncertainty->addresses == std::vector<std::string>{"trap.frequency"});
    // 0.4 kHz of a 1 MHz trap: 4e-4 of its angular frequency, which is 1 in trap units
    CHECK(nested.uncertainty->sd[0] == Approx(4e-4).epsilon(1e-12));
  }
}
