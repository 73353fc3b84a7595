// Scenario files: conversion to library values and positioned error messages.
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <limits>

#include "solver/errors.hpp"
#include "solver/scenario/scenario.hpp"

using namespace trapwork;
namespace fs = std::filesystem;

namespace {
// CODATA 2018 (NIST): exact h, kB; u to its 12 digits.
constexpr double codata_h = 6.62607015e-34;
constexpr double codata_kB = 1.380649e-23;
constexpr double codata_u = 1.66053906660e-27;
constexpr double pi = 3.14159265358979323846;
// Products and quotients of a handful of doubles: a few roundings each (common practice).
constexpr double eps8 = 8 * std::numeric_limits<double>::epsilon();
bool close(double a, double b, double rel = eps8) {
  return std::abs(a - b) <= rel * std::abs(b);
}

// 1-based line and column of the first occurrence of `needle` in `text`.
std::pair<int, int> position_of(const std::string& text, const std::string& needle) {
  const auto at = text.find(needle);
  REQUIRE(at != std::string::npos);
  const auto line_start = text.rfind('\n', at);
  const int line = 1 + int(std::count(text.begin(), text.begin() + at, '\n'));
  const int column = int(at - (line_start == std::string::npos ? 0 : line_start + 1)) + 1;
  return {line, column};
}

InputError error_of(const std::string& text, const std::string& file = "scenario.toml") {
  try {
    read_scenario_text(text, file);
  } catch (const InputError& e) {
    return e;
  }
  FAIL("no InputError for:\n" << text);
  throw;  // not reached
}

// Checks that the error sits at `needle` in the text, names `key`, and says `words`.
void check_error(const std::string& text, const std::string& needle, const std::string& key,
                 const std::string& words, const std::string& suggestion = "") {
  INFO(text);
  const InputError e = error_of(text);
  const auto [line, column] = position_of(text, needle);
  CHECK(e.file == "scenario.toml");
  CHECK(e.line == line);
  CHECK(e.column == column);
  CHECK(e.key == key);
  CHECK(e.suggestion == suggestion);
  CHECK_THAT(e.what(), Catch::StartsWith("scenario.toml:" + std::to_string(line) + ":" +
                                         std::to_string(column) + ": " + key) &&
                           Catch::Contains(words));
}

const std::string ion = R"(title = "test ion"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
)";

std::string replace(std::string text, const std::string& from, const std::string& to) {
  const auto at = text.find(from);
  REQUIRE(at != std::string::npos);
  return text.replace(at, from.size(), to);
}

fs::path scratch_dir(const std::string& name) {
  const fs::path dir = fs::path(TRAPWORK_BINARY_DIR) / "test-scenario" / name;
  fs::remove_all(dir);
  fs::create_directories(dir);
  return dir;
}
}  // namespace

TEST_CASE("the default scenario: a 40 u ion in a 1 MHz trap with a quartic term", "[scenario]") {
  const Scenario s = read_scenario_text(default_scenario_text(), "default");
  const double m = 40 * codata_u;
  CHECK(close(s.units.mass_kg, m));
  CHECK(close(s.units.length_m, std::sqrt(codata_h / (2 * pi) / (m * 2 * pi * 1e6))));
  REQUIRE(s.reference_frequency_Hz);
  CHECK(*s.reference_frequency_Hz == 1e6);
  CHECK(close(s.omega_ref, 1.0));
  CHECK(s.energy.name == "h*kHz");
  CHECK(close(s.energy.internal_per_unit, 1e-3));
  REQUIRE(s.potential.terms().size() == 1);
  const Term& trap = s.potential.terms()[0];
  CHECK(trap.name() == "trap");
  CHECK(trap.shape() == Shape::polynomial);
  CHECK(close(trap.parameter("frequency"), 1.0));
  // quartic = 0.0157 h*Hz/nm^4 in units of E0 / L0^4, E0 = h * 1 MHz: about 1e-3, which
  // raises the lowest spacing by 3 k4 L0^4 = 3e-3 hbar omega = 3 kHz (first order).
  CHECK(close(trap.parameter("quartic"),
              0.0157 * codata_h / 1e-36 * std::pow(s.units.length_m, 4) / (codata_h * 1e6)));
  CHECK(std::abs(3 * trap.parameter("quartic") - 3e-3) < 0.01 * 3e-3);
  // The protocol: 160 nm at constant speed in 2.5 us, from a Gibbs state with nbar = 2.
  REQUIRE(s.protocol);
  CHECK(close(s.protocol->duration, 2 * pi * 2.5));  // T0 = 1/omega
  REQUIRE(s.protocol->changes.size() == 1);
  CHECK(s.protocol->changes[0].parameter == "trap.centre");
  CHECK(s.protocol->changes[0].form == ScheduleForm::linear);
  CHECK(close(s.protocol->changes[0].to, 160e-9 / s.units.length_m));
  REQUIRE(s.work);
  CHECK(s.work->request.initial.kind() == InitialState::Kind::phonons);
  CHECK(s.work->request.initial.parameter() == 2);
  CHECK(s.spectrum.options.levels == 20);
  CHECK(s.output_folder == "default-output");
  CHECK_FALSE(s.title.empty());
}

TEST_CASE("every section of a scenario reaches the library values", "[scenario]") {
  const Scenario s = read_scenario_text(R"(
title = "all keys"
description = "checks"
[particle]
mass = "87 u"
[units]
reference_frequency = "10 kHz"
energy = "kB*nK"
[[potential]]
name = "trap"
shape = "polynomial"
frequency = "20 kHz"
centre = "0.5 um"
cubic = "1e-3 h*kHz/um^3"
[[potential]]
shape = "gaussian"
depth = "2 kB*uK"
waist = "800 nm"
[spectrum]
levels = 7
method = "lanczos"
fd_order = 6
degeneracy = "1e-4 kB*nK"
[grid]
points = 512
left = "-3 um"
right = "4 um"
convergence_check = false
search_half_width = "20 um"
[output]
folder = "somewhere"
)",
                                        "dir/all_keys.toml");
  const UnitSystem u = UnitSystem::for_trap(87 * codata_u, 1e4);
  CHECK(close(s.units.length_m, u.length_m));
  CHECK(close(s.omega_ref, 1.0));
  const double per_um = 1e-6 / u.length_m;
  const Term& trap = s.potential.terms()[0];
  CHECK(close(trap.parameter("frequency"), 2.0));  // 20 kHz in units of the 10 kHz reference
  CHECK(close(trap.parameter("centre"), 0.5 * per_um));
  CHECK(close(trap.parameter("cubic"), 1e-3 * codata_h * 1e3 / u.energy_J() / std::pow(per_um, 3)));
  const Term& tweezer = s.potential.terms()[1];
  CHECK(tweezer.name() == "term2");
  CHECK(close(tweezer.parameter("depth"), 2e-6 * codata_kB / u.energy_J()));
  CHECK(close(tweezer.parameter("waist"), 0.8 * per_um));
  CHECK(s.energy.name == "kB*nK");
  const auto& r = s.spectrum;
  CHECK(r.options.levels == 7);
  CHECK(r.options.method == EigenMethod::lanczos);
  CHECK(r.options.fd_order == 6);
  CHECK(close(r.options.degeneracy_tolerance, 1e-13 * codata_kB / u.energy_J()));
  REQUIRE(r.points);
  CHECK(*r.points == 512);
  REQUIRE(r.extent);
  CHECK(close(r.extent->first, -3 * per_um));
  CHECK(close(r.extent->second, 4 * per_um));
  CHECK_FALSE(r.convergence_check);
  CHECK(close(r.search_half_width, 20 * per_um));
  CHECK(close(r.search_centre, 0.5 * per_um));  // the first term's centre
  CHECK(s.output_folder == "somewhere");
  CHECK(s.title == "all keys");
  CHECK(s.description == "checks");
  REQUIRE(s.terms.size() == 2);
  CHECK(s.terms[0].parameters[0].given == "20 kHz");
}

TEST_CASE("units come from the first harmonic term, else from [units] length", "[scenario]") {
  const Scenario trap = read_scenario_text(ion, "ion.toml");
  CHECK(close(trap.units.length_m, UnitSystem::for_trap(40 * codata_u, 1e6).length_m));
  CHECK(trap.energy.name == "h*kHz");
  CHECK(trap.output_folder == "ion-output");

  const Scenario box = read_scenario_text(R"([particle]
mass = "87 u"
[units]
length = "2 um"
[box]
left = "-1 um"
right = "3 um"
[[potential]]
shape = "gaussian"
depth = "-1 kB*nK"
waist = "0.5 um"
)",
                                          "box.toml");
  CHECK(box.units.length_m == 2e-6);
  CHECK_FALSE(box.reference_frequency_Hz);
  CHECK(box.omega_ref == 0);
  CHECK(box.energy.name == "kB*uK");  // default without a reference frequency
  REQUIRE(box.spectrum.box);
  CHECK(close(box.spectrum.box->first, -0.5));
  CHECK(close(box.spectrum.box->second, 1.5));
}

// Issue 14: a bare number is read in internal units, which differ from scenario to scenario
// (here E0 = h*1 MHz, so temperature = 65e-6 would be 3.1 nK, not 65 uK).
TEST_CASE("issue 14: a bare number for a dimensional quantity needs [units] natural = true", "[scenario]") {
  const std::string cold = ion + "[protocol]\nduration = \"2 us\"\n[[protocol.change]]\nparameter = \"trap.centre\"\n"
                                 "to = \"20 nm\"\n[initial]\ntemperature = 65e-6\n";
  check_error(cold, "65e-6", "initial.temperature", "a temperature (e.g. \"2 uK\") with its unit");
  CHECK_THAT(error_of(cold).what(), Catch::Contains("initial.temperature = 6.5e-05: "));
  const InputError e = error_of(cold);
  // what the bare number would have meant, in lab units: 65e-6 E0/kB with E0 = h*1 MHz
  const double meant_uK = 65e-6 * codata_h * 1e6 / codata_kB * 1e6;
  char meant[32];
  std::snprintf(meant, sizeof meant, "%.3g nK", meant_uK * 1e3);  // 3.12 nK
  CHECK_THAT(e.what(), Catch::Contains(std::string("would mean ") + meant) &&
                           Catch::Contains("[units] natural = true"));
  // dimensionless values stay plain
  CHECK_NOTHROW(read_scenario_text(replace(cold, "temperature = 65e-6", "mean_phonons = 0.5"), "s.toml"));
  CHECK_NOTHROW(read_scenario_text(replace(cold, "temperature = 65e-6", "level = 1"), "s.toml"));

  // The switch: bare numbers are internal values (energies in hbar*omega_ref, lengths in L0).
  const std::string natural = replace(cold, "[protocol]", "[units]\nnatural = true\n[protocol]");
  const Scenario s = read_scenario_text(replace(replace(natural, "\"20 nm\"", "2"), "65e-6", "0.5"), "n.toml");
  CHECK(s.natural_units);
  CHECK(s.protocol->changes[0].to == 2);
  REQUIRE(s.work);
  CHECK(s.work->request.initial.kind() == InitialState::Kind::thermal);
  CHECK(s.work->request.initial.parameter() == 2);  // beta = 1/kT = 1/0.5
  // units still convert beside bare numbers
  CHECK(close(s.protocol->duration, 2e-6 * 2 * pi * 1e6));
  CHECK_FALSE(read_scenario_text(cold.substr(0, cold.find("[initial]")), "c.toml").natural_units);
  // the mass and the reference frequency set the units, so they need a unit even then
  check_error(replace(natural, "\"40 u\"", "40"), "40", "particle.mass", "with its unit");
}

TEST_CASE("a misspelt key is an error with a suggestion and its position", "[scenario]") {
  check_error(replace(ion, "frequency =", "frequncy ="), "frequncy", "potential[1].frequncy", "unknown key",
              "frequency");
  check_error(ion + "[spectra]\nlevels = 3\n", "spectra", "spectra", "unknown key", "spectrum");
  check_error(ion + "[spectrum]\nlevel = 3\n", "level =", "spectrum.level", "allowed in [spectrum]",
              "levels");
  check_error(replace(ion, "\"harmonic\"", "\"gausian\""), "\"gausian\"", "potential[1].shape", "one of",
              "gaussian");
  check_error(ion + "[spectrum]\nmethod = \"lancsoz\"\n", "\"lancsoz\"", "spectrum.method", "one of",
              "lanczos");
}

TEST_CASE("bad units and dimensions point at the value", "[scenario]") {
  check_error(replace(ion, "\"1 MHz\"", "\"1 Mhz\""), "\"1 Mhz\"", "potential[1].frequency",
              "'Mhz' is not known", "MHz");
  const std::string poly = replace(ion, "\"harmonic\"", "\"polynomial\"");
  check_error(poly + "quartic = \"3e-4 h*kHz/uum^4\"\n", "\"3e-4", "potential[1].quartic",
              "'uum' is not known", "um");
  check_error(poly + "quartic = \"3e-4 h*kHz/um^3\"\n", "\"3e-4", "potential[1].quartic",
              "an energy per length^4");
  check_error(ion + "centre = \"2 MHz\"\n", "\"2 MHz\"", "potential[1].centre", "a length");
  check_error(replace(ion, "\"40 u\"", "\"40 um\""), "\"40 um\"", "particle.mass", "a mass");
  check_error(ion + "[units]\nenergy = \"h*khz\"\n", "\"h*khz\"", "units.energy", "an energy unit", "h*kHz");
}

TEST_CASE("wrong types and out-of-range values are errors", "[scenario]") {
  check_error(replace(ion, "\"40 u\"", "40"), "40", "particle.mass", "with its unit");
  check_error(replace(ion, "\"40 u\"", "\"-40 u\""), "\"-40 u\"", "particle.mass", "a mass > 0");
  check_error(replace(ion, "\"1 MHz\"", "\"-1 MHz\""), "\"-1 MHz\"", "potential[1].frequency",
              "a frequency > 0");
  check_error(replace(ion, "\"1 MHz\"", "true"), "true", "potential[1].frequency", "a frequency");
  check_error(ion + "[spectrum]\nlevels = \"20\"\n", "\"20\"", "spectrum.levels", "a whole number");
  check_error(ion + "[spectrum]\nlevels = 0\n", "0\n", "spectrum.levels", "from 1");
  check_error(ion + "[spectrum]\nfd_order = 5\n", "5", "spectrum.fd_order", "2, 4, 6 or 8");
  check_error(ion + "[grid]\nconvergence_check = \"yes\"\n", "\"yes\"", "grid.convergence_check",
              "true or false");
  check_error(ion + "[grid]\nleft = \"2 um\"\nright = \"1 um\"\n", "\"1 um\"", "grid.right", "larger than");
  check_error(ion + "[box]\nleft = \"-1 um\"\nright = \"1 um\"\n[grid]\nleft = \"-2 um\"\nright = \"2 um\"\n",
              "\"-2 um\"", "grid.left", "[box]");
  check_error(ion + "[units]\nlength = \"1 um\"\n", "\"1 um\"", "units.length", "reference frequency");
  const std::string tweezer = R"([particle]
mass = "87 u"
[[potential]]
shape = "gaussian"
depth = "1 kB*mK"
waist = "0 um"
)";
  check_error(tweezer, "\"0 um\"", "potential[1].waist", "a length > 0");
  check_error(replace(ion, "[[potential]]", "[potential]"), "[potential]", "potential", "double brackets");
}

TEST_CASE("TOML syntax errors and missing sections", "[scenario]") {
  const std::string broken = replace(ion, "mass = \"40 u\"", "mass = \"40 u");
  const InputError e = error_of(broken);
  CHECK(e.line == position_of(broken, "mass").first);
  CHECK(e.column > 0);
  CHECK_THAT(e.what(), Catch::StartsWith("scenario.toml:" + std::to_string(e.line) + ":") &&
                           Catch::Contains("TOML syntax"));
  CHECK_THAT(error_of("[[potential]]\nshape = \"harmonic\"\nfrequency = \"1 MHz\"\n").what(),
             Catch::Contains("particle.mass"));
  CHECK_THAT(error_of("[particle]\nmass = \"1 u\"\n").what(), Catch::Contains("[[potential]]"));
  CHECK_THAT(error_of(replace(ion, "shape = \"harmonic\"\n", "")).what(),
             Catch::Contains("potential[1].shape"));
}

TEST_CASE("library errors are re-thrown at the scenario's key", "[scenario]") {
  // A duplicate term name is found by Potential::add: the error points at the second name.
  const std::string twice =
      ion + "[[potential]]\nname = \"trap\"\nshape = \"harmonic\"\nfrequency = \"2 MHz\"\n";
  const InputError dup = error_of(twice);
  CHECK(dup.key == "potential[2].name");
  CHECK(dup.line == position_of(twice, "name = \"trap\"\nshape = \"harmonic\"\nfrequency = \"2").first);
  CHECK_THAT(dup.what(), Catch::Contains("not used before"));
  // An unknown variable in a formula is found by muParser inside Term::formula.
  const std::string formula = R"([particle]
mass = "40 u"
[units]
reference_frequency = "1 MHz"
[[potential]]
shape = "formula"
expression = "0.5*k*x^2 + q"
x_unit = "um"
energy_unit = "h*kHz"
[potential.parameters]
k = 2.0
)";
  const InputError unknown = error_of(formula);
  CHECK(unknown.key == "potential[1].expression");
  CHECK(unknown.line == position_of(formula, "\"0.5*k").first);
  CHECK(unknown.column == position_of(formula, "\"0.5*k").second);
  CHECK_THAT(unknown.what(), Catch::Contains("named parameters"));
  check_error(replace(formula, "k = 2.0", "x = 2.0"), "x = 2.0", "potential[1].parameters.x", "other than x");
}

TEST_CASE("a formula term in lab units equals the harmonic term it spells out", "[scenario]") {
  // 0.5*k*x^2 with x in um and V in h*kHz is a harmonic trap with (1/2) m omega^2 = k h*kHz/um^2.
  const Scenario s = read_scenario_text(R"([particle]
mass = "40 u"
[units]
reference_frequency = "1 MHz"
[[potential]]
name = "written"
shape = "formula"
expression = "0.5*k*x^2"
x_unit = "um"
energy_unit = "h*kHz"
centre = "0.1 um"
[potential.parameters]
k = 2.5
)",
                                        "formula.toml");
  const UnitSystem& u = s.units;
  const double m = u.mass_kg, k_si = 2.5 * codata_h * 1e3 / 1e-12;
  const double omega_si = std::sqrt(k_si / m);
  const Term harmonic("h", Shape::harmonic,
                      {{"frequency", omega_si * u.time_s()}, {"centre", 0.1e-6 / u.length_m}});
  const Term& written = s.potential.terms()[0];
  for (double x_um : {-0.3, -0.05, 0.0, 0.15, 0.25, 0.7}) {
    const double x = x_um * 1e-6 / u.length_m;
    INFO("x = " << x_um << " um");
    // Both evaluate (1/2) c (x - x0)^2 from differently rounded factors (a sqrt, squares and
    // unit conversions, about ten roundings): 32 eps relative.
    CHECK(written.value(x) == Approx(harmonic.value(x)).epsilon(32 * std::numeric_limits<double>::epsilon()));
  }
}

TEST_CASE("tabulated terms read x, V rows from a data file next to the scenario", "[scenario]") {
  const fs::path dir = scratch_dir("table");
  {
    std::ofstream csv(dir / "trap.csv");
    csv << "# invented test rows\nx_um, V_uK\n-1, 1.0\n0, 0.0   # bottom\n\n1 , 4.0\n2, 9.0\n";
  }
  const std::string text = R"([particle]
mass = "87 u"
[[potential]]
name = "data"
shape = "table"
file = "trap.csv"
x_unit = "um"
energy_unit = "kB*uK"
)";
  const fs::path scenario = dir / "t.toml";
  { std::ofstream(scenario) << text; }
  const Scenario s = read_scenario(scenario.string());
  const Term& t = s.potential.terms()[0];
  const double per_uK = 1e-6 * codata_kB / s.units.energy_J();
  CHECK(close(t.value(0.0), 0.0, 0));
  CHECK(close(t.value(1.0), 4.0 * per_uK));  // L0 = 1 um: the row x = 1 um is x = 1 inside
  CHECK(close(t.value(-1.0), 1.0 * per_uK));

  // Bad rows: the error names the data file and its line.
  auto data_error = [&](const std::string& rows) {
    { std::ofstream(dir / "trap.csv") << rows; }
    try {
      read_scenario(scenario.string());
    } catch (const InputError& e) {
      return e;
    }
    FAIL("no error for rows:\n" << rows);
    throw;
  };
  const InputError decreasing = data_error("0, 1\n1, 2\n# comment\n0.5, 3\n");
  CHECK(decreasing.file == (dir / "trap.csv").string());
  CHECK(decreasing.line == 4);
  CHECK(decreasing.key == "potential[1].file");
  CHECK_THAT(decreasing.what(), Catch::Contains("trap.csv:4:1:") && Catch::Contains("increase"));
  const InputError not_finite = data_error("0, 1\n1, nan\n");
  CHECK(not_finite.line == 2);
  CHECK(not_finite.column == 4);
  CHECK_THAT(not_finite.what(), Catch::Contains("finite"));
  const InputError three = data_error("0, 1\n1, 2, 3\n");
  CHECK(three.line == 2);
  CHECK_THAT(three.what(), Catch::Contains("two numbers"));
  const InputError text_row = data_error("0, 1\n1, two\n");
  CHECK(text_row.line == 2);
  const InputError missing = [&] {
    fs::remove(dir / "trap.csv");
    try {
      read_scenario(scenario.string());
    } catch (const InputError& e) {
      return e;
    }
    FAIL("no error for a missing data file");
    throw;
  }();
  CHECK(missing.file == scenario.string());
  CHECK(missing.line == position_of(text, "\"trap.csv\"").first);
  CHECK_THAT(missing.what(), Catch::Contains("readable data file"));
}

TEST_CASE("a scenario file that cannot be opened is an input error", "[scenario]") {
  try {
    read_scenario("/nonexistent/trap.toml");
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK(e.file == "/nonexistent/trap.toml");
    CHECK_THAT(e.what(), Catch::Contains("cannot open"));
  }
}

TEST_CASE("every example scenario parses", "[scenario][examples]") {
  int count = 0;
  for (const auto& entry : fs::directory_iterator(fs::path(TRAPWORK_SOURCE_DIR) / "examples")) {
    if (entry.path().extension() != ".toml") continue;
    INFO(entry.path().string());
    const Scenario s = read_scenario(entry.path().string());
    CHECK_FALSE(s.title.empty());
    CHECK((!s.potential.terms().empty() || s.spectrum.box));  // a [box] may be empty (flat)
    ++count;
  }
  CHECK(count >= 5);
}

// ---- [protocol], [initial], [work], [sweep] --------------------------------------------------

namespace {
const std::string moving = ion + R"([protocol]
duration = "2.5 us"
[[protocol.change]]
parameter = "trap.centre"
to = "160 nm"
[initial]
temperature = "20 uK"
)";
}  // namespace

TEST_CASE("protocol, initial state, work settings and sweep reach the library values", "[scenario][work]") {
  const Scenario s = read_scenario_text(moving + R"([work]
integrator = "strang"
steps = 500
frame = "lab"
thermal_tolerance = 1e-8
max_initial_levels = 30
final_margin = 12
resolution = "2 h*kHz"
bin_width = "10 h*kHz"
reverse = false
time_step_check = false
threads = 2
[sweep]
parameter = "change[1].to"
values = ["100 nm", "0.2 um"]
)",
                                        "scenario.toml");
  const double L = s.units.length_m, T0 = s.units.time_s(), E0 = s.units.energy_J();
  REQUIRE(s.protocol);
  CHECK(close(s.protocol->duration, 2.5e-6 / T0));
  const ChangeSpec& c = s.protocol->changes.at(0);
  CHECK(c.form == ScheduleForm::linear);  // the default ramp
  CHECK_FALSE(c.from);                    // from the potential
  CHECK(close(c.to, 160e-9 / L));
  const Protocol p = build_protocol(s);
  CHECK(p.schedules().at(0).initial_value(p.duration()) == 0);
  CHECK(close(p.schedules().at(0).final_value(p.duration()), 160e-9 / L));
  const WorkRequest r = work_request(s);
  CHECK(r.integrator == Integrator::strang);
  CHECK(r.steps == 500);
  CHECK(r.co_moving == std::optional<bool>(false));
  CHECK(r.thermal_tolerance == 1e-8);
  CHECK(r.max_initial_levels == 30);
  CHECK(r.final_margin == 12);
  CHECK_FALSE(r.reverse_run);
  CHECK_FALSE(r.time_step_check);
  CHECK(r.threads == 2);
  CHECK(r.initial.kind() == InitialState::Kind::thermal);
  CHECK(close(1 / r.initial.parameter(), codata_kB * 20e-6 / E0));  // beta = 1 / (kB T)
  CHECK(close(*s.work->resolution, 2e3 * codata_h / E0));
  CHECK(close(*s.work->bin_width, 1e4 * codata_h / E0));
  REQUIRE(s.sweep);
  CHECK(s.sweep->axes[0].target == SweepTarget::change_to);
  CHECK(s.sweep->axes[0].unit == "nm");
  REQUIRE(s.sweep->axes[0].values.size() == 2);
  CHECK(close(s.sweep->axes[0].values[1], 200e-9 / L));
  CHECK(close(s.sweep->axes[0].values[1] / s.sweep->axes[0].internal_per_unit, 200));
  const Scenario second = at_sweep_point(s, 1);
  CHECK(close(second.protocol->changes[0].to, 200e-9 / L));
}

TEST_CASE("the other ramps, initial states and sweep forms", "[scenario][work]") {
  const fs::path dir = scratch_dir("ramps");
  {
    std::ofstream csv(dir / "ramp.csv");
    csv << "t,value\n0,1\n1.5,1.1\n3,1.2\n";
  }
  const std::string text = ion + R"([protocol]
duration = "3 us"
[[protocol.change]]
parameter = "trap.frequency"
ramp = "table"
file = "ramp.csv"
time_unit = "us"
value_unit = "MHz"
[initial]
weights = [1, 3]
[sweep]
parameter = "protocol.duration"
from = "1 us"
to = "3 us"
points = 3
)";
  const Scenario s = read_scenario_text(text, (dir / "table.toml").string());
  const Protocol p = build_protocol(s);
  const double T0 = s.units.time_s();
  // omega = 2 pi f: 1 MHz is 1 in trap units, 1.2 MHz is 1.2.
  CHECK(close(p.schedules()[0].evaluate(1.5e-6 / T0, p.duration()).value, 1.1));
  CHECK(close(p.schedules()[0].final_value(p.duration()), 1.2));
  CHECK(s.work->request.initial.kind() == InitialState::Kind::mixture);
  CHECK(s.sweep->axes[0].values.size() == 3);
  CHECK(close(s.sweep->axes[0].values[1], 2e-6 / T0));
  CHECK(s.sweep->axes[0].unit == "us");
  // what the ramp table held besides data is kept for the report (issue 14: nothing silent)
  CHECK(s.protocol->changes[0].file_skipped == "header line 1 (t, value)");

  // A formula in lab units: value_unit "nm", time_unit "us", pi, and sqrt left alone.
  const Scenario f = read_scenario_text(ion + R"toml([protocol]
duration = "2.5 us"
[[protocol.change]]
parameter = "trap.centre"
ramp = "formula"
formula = "160*sin(pi*t/(2*tau))^2 + 0*sqrt(t)"
time_unit = "us"
value_unit = "nm"
[initial]
level = 2
)toml",
                                        "scenario.toml");
  const Protocol pf = build_protocol(f);
  const double tau = pf.duration(), L = f.units.length_m;
  CHECK(close(pf.schedules()[0].final_value(tau), 160e-9 / L, 1e-12));
  CHECK(close(pf.schedules()[0].evaluate(tau / 2, tau).value, 80e-9 / L, 1e-12));
  CHECK(f.work->request.initial.kind() == InitialState::Kind::eigenstate);
  CHECK(f.work->request.initial.level() == 2);
}

TEST_CASE("errors in the protocol, initial state and sweep name file, line, column and key", "[scenario][work]") {
  check_error(replace(moving, "to = \"160 nm\"", "ramp = \"lineer\"\nto = \"160 nm\""), "\"lineer\"",
              "protocol.change[1].ramp", "one of constant, linear, smooth, smoother, table, formula", "linear");
  check_error(replace(moving, "\"trap.centre\"", "\"trap.center\""), "\"trap.center\"",
              "protocol.change[1].parameter", "a parameter of the potential: trap.frequency, trap.centre",
              "trap.centre");
  check_error(replace(moving, "temperature = \"20 uK\"", "temperature = \"20 uK\"\nlevel = 0"), "level = 0",
              "initial.level", "only one initial state ([initial] already has temperature)");
  check_error(replace(moving, "to = \"160 nm\"", "to = \"160 kHz\""), "\"160 kHz\"", "protocol.change[1].to",
              "a length");
  check_error(replace(moving, "to = \"160 nm\"", "to = \"1 nm\"\nsped = 2"), "sped", "protocol.change[1].sped",
              "unknown key");
  check_error(moving + "[sweep]\nparameter = \"protocol.duration\"\nvalues = [\"1 us\", \"2 nm\"]\n", "\"2 nm\"",
              "sweep.values[2]", "a time");
  check_error(moving + "[sweep]\nparameter = \"trap.frequncy\"\nvalues = [\"1 MHz\"]\n", "\"trap.frequncy\"",
              "sweep.parameter", "protocol.duration", "trap.frequency");
  check_error(replace(moving, "duration = \"2.5 us\"", "duration = \"-1 us\""), "\"-1 us\"", "protocol.duration",
              "a duration >= 0");
  check_error(replace(moving, "temperature = \"20 uK\"", "mean_phonons = \"2 uK\""), "\"2 uK\"",
              "initial.mean_phonons", "a plain number");
  check_error(moving + "[work]\nintegrator = \"rk4\"\n", "\"rk4\"", "work.integrator",
              "one of fourth_order, strang, eigenbasis");
  // A frequency that a formula drives through zero: the harmonic shape refuses it mid-protocol.
  check_error(ion + "[protocol]\nduration = \"1 us\"\n[[protocol.change]]\nparameter = \"trap.frequency\"\n"
                    "ramp = \"formula\"\nformula = \"1 - 2*t\"\ntime_unit = \"us\"\nvalue_unit = \"MHz\"\n",
              "[[protocol.change]]", "protocol.change", "trap.frequency");
}

TEST_CASE("a bad row in a ramp table names the data file and its line", "[scenario][work]") {
  const fs::path dir = scratch_dir("bad-ramp");
  {
    std::ofstream csv(dir / "ramp.csv");
    csv << "t,value\n0,0\n1,oops\n2,3\n";
  }
  const std::string text = ion + R"([protocol]
duration = "2 us"
[[protocol.change]]
parameter = "trap.centre"
ramp = "table"
file = "ramp.csv"
time_unit = "us"
value_unit = "nm"
)";
  try {
    read_scenario_text(text, (dir / "s.toml").string());
    FAIL("no error for a bad table row");
  } catch (const InputError& e) {
    CHECK(e.file == (dir / "ramp.csv").string());
    CHECK(e.line == 3);
    CHECK(e.column == 3);  // the field that is not a number
    CHECK(e.key == "protocol.change[1].file");
    CHECK_THAT(e.what(), Catch::Contains("two numbers per row, t and value"));
  }
  // A table that stops before the end of the protocol.
  {
    std::ofstream csv(dir / "ramp.csv");
    csv << "0,0\n1,5\n";
  }
  try {
    read_scenario_text(text, (dir / "s.toml").string());
    FAIL("no error for a short table");
  } catch (const InputError& e) {
    CHECK(e.key == "protocol.change[1].file");
    CHECK(e.line == position_of(text, "\"ramp.csv\"").first);
    CHECK(e.column == position_of(text, "\"ramp.csv\"").second);
    CHECK_THAT(e.what(), Catch::Contains("covering the protocol"));
  }
}

// Issue 14: library messages about a scenario say lengths and energies in its lab units.
TEST_CASE("issue 14: a potential that does not confine is described in lab units", "[scenario]") {
  const Scenario s = read_scenario_text(replace(ion, "\"harmonic\"", "\"polynomial\"") + "quartic = \"-1 h*Hz/nm^4\"\n",
                                        "open.toml");
  std::string message;
  try {
    (void)compute_spectrum(s.potential, s.spectrum);
  } catch (const PhysicsError& e) {
    message = e.what();
  }
  // the search window is 500 oscillator lengths either side: 500 * 15.9 nm = 7.95 um
  const double half_um = 500 * s.units.length_m * 1e6;
  char window[80];
  std::snprintf(window, sizeof window, "search window from %.6g um to %.6g um", -half_um, half_um);
  CHECK_THAT(message, Catch::Contains(window) && Catch::Contains(" h*kHz)"));
  CHECK_THAT(message, !Catch::Contains("[-500, 500]"));
}
