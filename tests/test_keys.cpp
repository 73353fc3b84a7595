// The key reference (solver/scenario/keys.hpp) against the scenario reader: every key it lists is
// accepted and read, every other key is refused; the examples use only its keys; the checked-in
// Markdown copy is the generated one. Also the polynomial's linear term and formula parameters
// with units, which the reference documents (issue 16).
#include <catch2/catch.hpp>
#include <toml++/toml.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/scenario/keys.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/spectrum.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;
namespace fs = std::filesystem;

namespace {

const std::string source_dir = TRAPWORK_SOURCE_DIR;
const std::string table_csv = (fs::path(source_dir) / "examples" / "tabulated_trap.csv").string();

// A valid scenario with every table the reader knows for `trapwork sweep` on a polynomial trap.
const char* const trap_base = R"(title = "base"
[particle]
mass = "40 u"
[units]
[[potential]]
name = "trap"
shape = "polynomial"
frequency = "1 MHz"
[spectrum]
[grid]
[output]
[protocol]
duration = "2.5 us"
[[protocol.change]]
parameter = "trap.centre"
to = "20 nm"
[initial]
mean_phonons = 1
[work]
[sweep]
parameter = "protocol.duration"
values = ["1 us", "2 us"]
)";

// A box whose right wall moves, with soft walls to compare.
const char* const box_base = R"([particle]
mass = "7 u"
[box]
left = "0 um"
right = "2 um"
[box.soft_walls]
widths = ["0.2 um"]
height = "20 kB*uK"
[protocol]
duration = "10 us"
[[protocol.change]]
parameter = "box.right"
to = "2.5 um"
[initial]
level = 0
)";

// One term of `shape` with its required keys (the reference's examples), in a trap with units.
std::string shape_base(Shape shape) {
  std::string text = "[particle]\nmass = \"40 u\"\n[units]\nreference_frequency = \"1 MHz\"\n[[potential]]\nname = "
                     "\"t\"\nshape = \"" +
                     std::string(shape_name(shape)) + "\"\n";
  const ShapeSpec& spec = shape_spec(shape);
  for (const auto& k : spec.parameters)
    if (k.required()) text += k.name + " = " + k.example + "\n";
  if (shape == Shape::table)
    text += "file = \"" + table_csv + "\"\nx_unit = \"um\"\nenergy_unit = \"h*kHz\"\n";
  if (shape == Shape::formula) text += "expression = \"0.5*x^2\"\nx_unit = \"um\"\nenergy_unit = \"h*kHz\"\n";
  return text;
}

// The table at `address` inside `root` (the first element of an array of tables).
toml::table* table_at(toml::table& root, const std::string& address) {
  if (address == "top") return &root;
  toml::table* t = &root;
  std::stringstream parts(address);
  std::string part;
  while (std::getline(parts, part, '.')) {
    toml::node* n = t->get(part);
    REQUIRE(n);
    if (n->is_array()) n = n->as_array()->get(0);
    t = n->as_table();
    REQUIRE(t);
  }
  return t;
}

// The scenario text `base` with key = value (TOML text) set in the table at `address`.
std::string with_key(const std::string& base, const std::string& address, const std::string& key,
                     const std::string& value, bool clear_table = false) {
  toml::table root = toml::parse(base);
  toml::table* t = table_at(root, address);
  if (clear_table) t->clear();
  const toml::table holder = toml::parse("v = " + value);
  t->insert_or_assign(key, *holder.get("v"));
  std::ostringstream out;
  out << toml::toml_formatter(root);
  return out.str();
}

// The reader's message for `text`, "" when it reads.
std::string reader_error(const std::string& text) {
  try {
    (void)read_scenario_text(text, "keys_test.toml");
  } catch (const InputError& e) {
    return e.what();
  }
  return {};
}

// The trap with white position noise on its centre.
const std::string noise_base = std::string(trap_base) + R"([noise]
realisations = 10
[[noise.source]]
parameter = "trap.centre"
white = "1e-24 m^2/Hz"
)";

// The trap swept over a grid ([[sweep.axis]]) or a list of points (parameters), issue 20.
const std::string grid_base = std::string(trap_base).substr(0, std::string(trap_base).find("[sweep]")) + R"([[sweep.axis]]
parameter = "protocol.duration"
values = ["1 us", "2 us"]
[[sweep.axis]]
parameter = "initial.mean_phonons"
values = [1, 2]
)";
const std::string list_base = std::string(trap_base).substr(0, std::string(trap_base).find("[sweep]")) + R"([sweep]
parameters = ["protocol.duration", "initial.mean_phonons"]
values = [["1 us", 1], ["2 us", 2]]
)";

// Which base scenario holds the table at `address` (keys of [box] need a box).
std::string base_for(const std::string& address) {
  if (address == "noise" || address == "noise.source") return noise_base;
  // [bath]: the rate; temperature or mean_phonons (exactly one) is the key tested
  if (address == "bath") return std::string(trap_base) + "[bath]\nrate = \"200 /s\"\n";
  if (address == "sweep.axis") return grid_base;
  // [uncertainty]: the sd of the trap's frequency (the protocol changes its centre)
  if (address == "uncertainty") return std::string(trap_base) + "[uncertainty.sd]\n\"trap.frequency\" = \"0.4 kHz\"\n";
  return address == "box" || address == "box.soft_walls" ? box_base : trap_base;
}

// A [[noise.source]] with the keys `key` is read with (white, psd_file, heating_rate exclude each
// other; frequency_unit and psd_unit go with psd_file, at_frequency with heating_rate).
std::string noise_source_base(const std::string& key) {
  std::string source = "parameter = \"trap.centre\"\n";
  if (key == "frequency_unit" || key == "psd_unit") source += "psd_file = \"psd.csv\"\n";
  if (key == "psd_file" || key == "frequency_unit") source += "psd_unit = \"m^2/Hz\"\n";
  if (key == "at_frequency") source += "heating_rate = \"500 quanta/s\"\n";
  if (key == "parameter") source += "white = \"1e-24 m^2/Hz\"\n";
  return std::string(trap_base) + "[noise]\n[[noise.source]]\n" + source;
}

// How the reader names the table at `address` in its messages (arrays of tables: the first).
std::string dotted_table(const std::string& address) {
  return address == "protocol.change" || address == "noise.source" || address == "sweep.axis" ? address + "[1]"
                                                                                                 : address;
}

// Tables whose keys exclude each other: the test of one key clears the table first.
bool exclusive(const std::string& address) { return address == "initial"; }

}  // namespace

TEST_CASE("issue 16: every key of the reference is accepted by the reader", "[keys]") {
  for (const TableSpec& t : scenario_tables()) {
    if (t.address == "potential") continue;  // per shape below
    for (const KeySpec& k : t.keys) {
      if (t.address == "top" && (k.type == KeyType::table || k.type == KeyType::tables)) continue;  // bases hold them
      if (k.example.empty()) continue;
      INFO(t.address << "." << k.name << " = " << k.example);
      const std::string error = reader_error(with_key(base_for(t.address), t.address, k.name, k.example,
                                                      exclusive(t.address)));
      CHECK_THAT(error, !Contains("unknown key"));
    }
  }
  for (const ShapeSpec& s : shape_specs()) {
    std::vector<KeySpec> keys = s.parameters;
    keys.insert(keys.end(), s.settings.begin(), s.settings.end());
    keys.insert(keys.end(), table_spec("potential").keys.begin(), table_spec("potential").keys.end());
    for (const KeySpec& k : keys) {
      if (k.name == "shape" || k.name == "file") continue;  // set by shape_base
      INFO("shape " << shape_name(s.shape) << ": " << k.name << " = " << k.example);
      const std::string error = reader_error(with_key(shape_base(s.shape), "potential", k.name, k.example));
      // The example values are valid: the whole scenario reads.
      CHECK(error == "");
    }
  }
}

TEST_CASE("issue 16: the reader reads every key of the reference (a date value is refused at that key)", "[keys]") {
  // A TOML date is valid for no key: an error naming the key shows that the reader looks at it
  // (a key accepted but never read would pass silently).
  auto named = [](const std::string& error, const std::string& dotted) {
    INFO(error);
    CHECK_THAT(error, Contains("keys_test.toml:") && Contains(dotted + " = a date or time"));
  };
  for (const TableSpec& t : scenario_tables()) {
    if (t.address == "potential") continue;
    for (const KeySpec& k : t.keys) {
      std::string base = t.address == "noise.source" ? noise_source_base(k.name) : base_for(t.address);
      if (t.address == "sweep" && k.name == "parameters") base = list_base;  // the forms exclude each other
      if (t.address == "sweep" && k.name == "axis") base = grid_base;
      if ((t.address == "sweep" || t.address == "sweep.axis") && k.name != "values" && k.name != "parameter" &&
          k.name != "parameters" && k.name != "axis") {  // from/to/points exclude values
        toml::table root = toml::parse(base);
        toml::table& sweep = *table_at(root, t.address);
        sweep.erase("values");
        sweep.insert_or_assign("from", "1 us");
        sweep.insert_or_assign("to", "2 us");
        sweep.insert_or_assign("points", 2);
        std::ostringstream out;
        out << toml::toml_formatter(root);
        base = out.str();
      }
      const std::string dotted = t.address == "top" ? k.name : dotted_table(t.address) + "." + k.name;
      INFO(dotted);
      named(reader_error(with_key(base, t.address, k.name, "1979-05-27", exclusive(t.address))), dotted);
    }
  }
  for (const ShapeSpec& s : shape_specs())
    for (const auto* list : {&s.parameters, &s.settings})
      for (const KeySpec& k : *list) {
        INFO("shape " << shape_name(s.shape));
        named(reader_error(with_key(shape_base(s.shape), "potential", k.name, "1979-05-27")), "potential[1]." + k.name);
      }
}

TEST_CASE("issue 16: a key not in the reference is refused with file, line and key", "[keys]") {
  auto refused = [](const std::string& text, const std::string& dotted) {
    const std::string error = reader_error(text);
    INFO(text);
    // with_key writes the key last in its table; its line is where "not_a_key" stands
    std::istringstream lines(text);
    std::string line;
    int number = 0, at = 0;
    while (std::getline(lines, line))
      if (++number && line.find("not_a_key") != std::string::npos) at = number;
    CHECK_THAT(error, Contains("keys_test.toml:" + std::to_string(at) + ":") && Contains(dotted) &&
                          Contains("unknown key"));
  };
  for (const TableSpec& t : scenario_tables()) {
    if (t.address == "potential") continue;
    const std::string dotted = t.address == "top" ? "not_a_key" : dotted_table(t.address) + ".not_a_key";
    refused(with_key(base_for(t.address), t.address, "not_a_key", "1"), dotted);
  }
  for (const ShapeSpec& s : shape_specs())
    refused(with_key(shape_base(s.shape), "potential", "not_a_key", "1"), "potential[1].not_a_key");
  // A key of another shape is not a key of this one.
  const std::string error = reader_error(with_key(shape_base(Shape::harmonic), "potential", "quartic", "\"1 h*Hz/nm^4\""));
  CHECK_THAT(error, Contains("potential[1].quartic") && Contains("unknown key"));
}

TEST_CASE("issue 16: each choice the reference lists is accepted", "[keys]") {
  for (const TableSpec& t : scenario_tables())
    for (const KeySpec& k : t.keys)
      for (const auto& c : k.choices) {
        if (t.address == "potential") continue;  // shapes: every shape_base reads above
        INFO(t.address << "." << k.name << " = " << c);
        CHECK_THAT(reader_error(with_key(base_for(t.address), t.address, k.name, "\"" + c + "\"")), !Contains("one of"));
      }
}

TEST_CASE("issue 16: the reference's shapes are the library's shapes, parameters in the same order", "[keys]") {
  REQUIRE(shape_specs().size() == table_spec("potential").keys[1].choices.size());
  for (const ShapeSpec& s : shape_specs()) {
    std::vector<std::string> library;
    for (const auto& p : shape_parameters(s.shape))
      if (p != "length_factor" && p != "time_factor") library.push_back(p);  // formula: set from the units
    std::vector<std::string> reference;
    for (const auto& k : s.parameters) reference.push_back(k.name);
    CHECK(reference == library);
    CHECK_FALSE(s.formula.empty());
  }
}

// The keys of a parsed scenario that the reference does not list ("" when all are listed).
std::string unlisted_keys(const toml::table& root) {
  std::string out;
  auto check = [&](const toml::table& t, const std::vector<std::string>& allowed, const std::string& where) {
    for (const auto& [k, v] : t)
      if (std::find(allowed.begin(), allowed.end(), std::string(k.str())) == allowed.end())
        out += where + "." + std::string(k.str()) + " ";
  };
  check(root, table_keys("top"), "top");
  for (const auto& t : scenario_tables()) {
    if (t.address == "top") continue;
    const toml::node* n = root.at_path(t.address).node();
    if (!n) continue;
    if (const toml::array* a = n->as_array()) {
      for (const auto& e : *a) {
        const toml::table* et = e.as_table();
        if (!et) continue;
        std::vector<std::string> allowed = table_keys(t.address);
        if (t.address == "potential") {
          const auto shape = shape_from_name(et->get("shape") ? et->get("shape")->value_or(std::string()) : "");
          if (!shape) {
            out += "potential.shape? ";
            continue;
          }
          allowed = term_keys(*shape);
        }
        check(*et, allowed, t.address);
      }
    } else if (const toml::table* tt = n->as_table()) {
      check(*tt, table_keys(t.address), t.address);
    }
  }
  return out;
}

TEST_CASE("issue 16: every example scenario uses only keys of the reference", "[keys]") {
  int examples = 0;
  for (const auto& entry : fs::directory_iterator(fs::path(source_dir) / "examples")) {
    if (entry.path().extension() != ".toml") continue;
    ++examples;
    INFO(entry.path().string());
    const toml::table root = toml::parse_file(entry.path().string());
    CHECK(unlisted_keys(root) == "");
  }
  CHECK(examples >= 10);
  // The check can fail: a key outside the reference is found.
  CHECK(unlisted_keys(toml::parse("[work]\nsteps = 3\nstep = 4\n")) == "work.step ");
  CHECK(unlisted_keys(toml::parse("[[potential]]\nshape = \"harmonic\"\nquartic = 1\n")) == "potential.quartic ");
}

TEST_CASE("issue 16: examples/scenario-keys.md is the generated reference", "[keys]") {
  std::ifstream in(fs::path(source_dir) / "examples" / "scenario-keys.md", std::ios::binary);
  REQUIRE(in);
  std::ostringstream text;
  text << in.rdbuf();
  INFO("regenerate with: build/trapwork keys --markdown > examples/scenario-keys.md");
  CHECK(text.str() == keys_text("", true));
}

TEST_CASE("issue 16: trapwork keys addresses one table or shape, and refuses an unknown one", "[keys]") {
  CHECK_THAT(keys_text("work", false), Contains("[work]") && Contains("thermal_tolerance") && !Contains("[sweep]"));
  CHECK_THAT(keys_text("potential.gaussian", false), Contains("waist") && Contains("exp(-2 (x - centre)^2 / waist^2)"));
  CHECK(keys_text("gaussian", false) == keys_text("potential.gaussian", false));
  CHECK_THAT(keys_text("potential.polynomial", true), Contains("`linear`") && Contains("energy per length with unit"));
  CHECK_THAT(keys_text("", false), Contains("[box.soft_walls]") && Contains("shape = \"formula\""));
  try {
    (void)keys_text("wrok", false);
    FAIL("an unknown table was accepted");
  } catch (const InputError& e) {
    CHECK_THAT(std::string(e.what()), Contains("wrok") && Contains("work, sweep") && Contains("potential.formula") &&
                                          Contains("did you mean 'work'"));
  }
}

// ---- the polynomial's linear term ------------------------------------------------------------

TEST_CASE("issue 16: a linear term shifts the harmonic ground state by -F^2/(2 m omega^2)", "[keys][potential]") {
  // Displaced oscillator: (1/2) m w^2 y^2 + F y = (1/2) m w^2 (y + F/(m w^2))^2 - F^2/(2 m w^2), so
  // every level moves down by F^2/(2 m w^2) (completing the square; common practice).
  // F = 126 h*MHz/um is about 2 hbar*omega/L0 at 40 u and 1 MHz (L0 = 15.9 nm).
  const std::string text = R"([particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "polynomial"
frequency = "1 MHz"
linear = "126 h*MHz/um"
[spectrum]
levels = 4
)";
  const Scenario s = read_scenario_text(text, "linear.toml");
  // The reader's conversion, checked from CODATA 2018 h (exact SI) and the unit system.
  const double force_si = 126 * 6.62607015e-34 * 1e6 / 1e-6;
  const double force = s.potential.parameter("trap.linear");
  CHECK(force == Approx(force_si / (s.units.energy_J() / s.units.length_m)).epsilon(1e-12));
  const double w = s.potential.parameter("trap.frequency");
  CHECK(w == Approx(1.0).epsilon(1e-12));  // trap units: omega_ref = 1
  const double shift = -force * force / (2 * w * w);
  REQUIRE(shift < -1.5);  // a shift of more than one level spacing: not a small effect
  for (EigenMethod method : {EigenMethod::automatic, EigenMethod::hermite}) {
    SpectrumRequest r = s.spectrum;
    r.options.method = method;
    const SpectrumResult result = compute_spectrum(s.potential, r);
    for (int n = 0; n < 4; ++n) {
      INFO("method " << int(method) << ", level " << n);
      // The solver's bound: residual and grid-convergence tolerances of 1e-9 (SpectrumOptions,
      // SpectrumRequest::energy_tolerance); 1e-8 leaves room for the harmonic levels' rounding.
      CHECK(std::abs(result.spectrum.energies(n) - (w * (n + 0.5) + shift)) < 1e-8);
    }
  }
  // The minimum moved by -F/(m w^2): the harmonic part reports it.
  CHECK(s.potential.harmonic_part()->second == Approx(-force / (w * w)).epsilon(1e-12));
  // The wrong dimension is refused at the key.
  const std::string wrong = R"([particle]
mass = "40 u"
[[potential]]
shape = "polynomial"
frequency = "1 MHz"
linear = "1 h*kHz"
)";
  CHECK_THAT(reader_error(wrong), Contains("keys_test.toml:6:10: potential[1].linear = \"1 h*kHz\"") &&
                                      Contains("an energy per length"));
}

// ---- formula parameters with units -------------------------------------------------------

namespace {
std::string formula_scenario(const std::string& parameters) {
  return R"TOML([particle]
mass = "40 u"
[units]
reference_frequency = "1 MHz"
[[potential]]
name = "well"
shape = "formula"
expression = "v0*((x - a)/w)^2 + v4*((x - a)/w)^4*(1 + 0.01*sin(2*_pi*f*t))"
x_unit = "um"
energy_unit = "h*kHz"
time_unit = "us"
[potential.parameters]
)TOML" + parameters + "[spectrum]\nlevels = 6\n";
}
}  // namespace

TEST_CASE("issue 16: formula parameters may carry units, converted to the formula's units", "[keys][formula]") {
  const Scenario plain = read_scenario_text(
      formula_scenario("a = 0.3\nv0 = 250\nw = 0.05\nv4 = 4\nf = 1.5\n"), "plain.toml");
  const Scenario units = read_scenario_text(
      formula_scenario("a = \"300 nm\"\nv0 = \"0.25 h*MHz\"\nw = \"50 nm\"\nv4 = \"4 h*kHz\"\nf = \"1.5 MHz\"\n"),
      "units.toml");
  // Unit conversions of SI-exact factors: a few roundings (common practice: 1e-14 relative).
  for (const char* p : {"well.a", "well.v0", "well.w", "well.v4", "well.f"})
    CHECK(units.potential.parameter(p) == Approx(plain.potential.parameter(p)).epsilon(1e-14));
  // An angular frequency is in radians per time_unit: 2 pi x 1.5 per us.
  const Scenario angular = read_scenario_text(formula_scenario("a = 0\nv0 = 1\nw = 1\nv4 = 0\nf = \"2pi*1.5 MHz\"\n"),
                                              "angular.toml");
  CHECK(angular.potential.parameter("well.f") == Approx(2 * 3.14159265358979323846 * 1.5).epsilon(1e-14));
  // The same spectrum: both scenarios' potentials agree to rounding, so do their energies.
  const SpectrumResult a = compute_spectrum(plain.potential, plain.spectrum);
  const SpectrumResult b = compute_spectrum(units.potential, units.spectrum);
  for (int n = 0; n < 6; ++n) CHECK(b.spectrum.energies(n) == Approx(a.spectrum.energies(n)).epsilon(1e-10));
  // A dimension the formula's units cannot hold is refused at the value.
  const std::string error = reader_error(formula_scenario("a = \"40 u\"\nv0 = 1\nw = 1\nv4 = 0\nf = 0\n"));
  CHECK_THAT(error, Contains("keys_test.toml:13:5: potential[1].parameters.a = \"40 u\"") && Contains("mass"));
  CHECK_THAT(reader_error(formula_scenario("a = \"3 furlong\"\nv0 = 1\nw = 1\nv4 = 0\nf = 0\n")),
             Contains("potential[1].parameters.a") && Contains("furlong"));
}

// ---- angular frequencies --------------------------------------------------------------------

TEST_CASE("issue 16: a frequency key takes \"2pi*1.5 MHz\" as the angular frequency of f = 1.5 MHz", "[keys][units]") {
  auto trap = [](const std::string& frequency) {
    return std::string("[particle]\nmass = \"40 u\"\n[units]\nreference_frequency = \"1 MHz\"\n[[potential]]\n"
                       "name = \"trap\"\nshape = \"harmonic\"\nfrequency = ") +
           frequency + "\n";
  };
  const double ordinary = read_scenario_text(trap("\"1.5 MHz\""), "a.toml").potential.parameter("trap.frequency");
  CHECK(ordinary == Approx(1.5).epsilon(1e-14));  // omega / omega_ref
  for (const char* text : {"\"2pi*1.5 MHz\"", "\"2*pi*1.5 MHz\"", "\"2 pi * 1.5 MHz\"", "\"2\xCF\x80\xC3\x97" "1.5 MHz\"",
                           "\"9.42477796076938 rad/us\""}) {
    INFO(text);
    CHECK(read_scenario_text(trap(text), "a.toml").potential.parameter("trap.frequency") ==
          Approx(ordinary).epsilon(1e-14));
  }
  // Ambiguous: s^-1 does not say whether 2 pi is in it.
  for (const char* text : {"\"9.42e6 1/s\"", "\"9.42 us^-1\"", "\"9.42 /us\""}) {
    INFO(text);
    CHECK_THAT(reader_error(trap(text)), Contains("keys_test.toml:8:13: potential[1].frequency") &&
                                             Contains("write \"1.5 MHz\" (ordinary frequency f) or \"2pi*1.5 MHz\""));
  }
  // 2pi* and rad belong to frequencies only.
  CHECK_THAT(reader_error(trap("\"2pi*1.5 um\"")), Contains("a frequency after 2pi*"));
  CHECK_THAT(reader_error(trap("\"2pi*9.42 rad/us\"")), Contains("a frequency after 2pi*"));
  CHECK_THAT(reader_error(trap("\"3 rad\"")), Contains("rad only in an angular frequency"));
}
