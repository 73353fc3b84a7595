// A catalogue of bad inputs and what trapwork must say about each: one row per case, with
// the input, where the message must point (file:line:column and key) and the words it must
// contain. Three tables: scenario files (InputError from the reader), valid scenarios the
// physics cannot use (PhysicsError, or a warning carrying its diagnostic value), and whole
// command lines (exit status and the error on stderr, and no output files left behind).
// A case that ever crashed, or gave a silent number or an unclear message, stays here as a
// regression test with the fix beside the code it exercised.
//
#include "solver/scenario/output.hpp"

#include <sys/wait.h>

#include <catch2/catch.hpp>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <map>
#include <optional>
#include <string>
#include <vector>

#include "scratch_files.hpp"
#include "solver/errors.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/work.hpp"

using namespace trapwork;
namespace fs = std::filesystem;

namespace {

// ---- inputs the rows are built from ------------------------------------------------------

// A 40 u ion in a 1 MHz harmonic trap (oscillator length about 11 nm).
const std::string ion = R"(title = "bad inputs"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
)";

// The ion moved by 30 nm in 1.5 us from a nearly cold state: a work run of a few seconds.
const std::string moving = ion + R"([protocol]
duration = "1.5 us"
[[protocol.change]]
parameter = "trap.centre"
to = "30 nm"
[initial]
mean_phonons = 0.3
)";

// A potential read from trap.csv (rows x in um, V in kB*uK) beside the scenario.
const std::string tabulated = R"([particle]
mass = "87 u"
[[potential]]
name = "data"
shape = "table"
file = "trap.csv"
x_unit = "um"
energy_unit = "kB*uK"
)";

// A formula term in lab units with one named parameter k.
const std::string formula = R"([particle]
mass = "40 u"
[units]
reference_frequency = "1 MHz"
[[potential]]
name = "f"
shape = "formula"
expression = "0.5*k*x^2"
x_unit = "um"
energy_unit = "h*kHz"
[potential.parameters]
k = 2.0
)";

// Soft walls (a power_walls term, not the hard [box]) whose right wall is ramped through the
// left one: 10 um -> -2 um in 4 ms crosses 0 um at 3.33 ms.
const std::string soft_walls = R"(title = "soft walls"
[particle]
mass = "87 u"
[units]
energy = "kB*nK"
[[potential]]
name = "walls"
shape = "power_walls"
left = "0 um"
right = "10 um"
height = "100 kB*nK"
width = "0.5 um"
[protocol]
duration = "4 ms"
[[protocol.change]]
parameter = "walls.right"
to = "-2 um"
[initial]
temperature = "2 nK"
)";

std::string with(std::string text, const std::string& from, const std::string& to) {
  const auto at = text.find(from);
  REQUIRE(at != std::string::npos);
  return text.replace(at, from.size(), to);
}

// The lines of a result's warnings or notes, one per line, for Contains and INFO.
std::string joined(const std::vector<std::string>& lines) {
  std::string text;
  for (const auto& line : lines) text += line + "\n";
  return text;
}

// 1-based line and column of the first occurrence of `needle` in `text`.
std::pair<int, int> position_of(const std::string& text, const std::string& needle) {
  const auto at = text.find(needle);
  REQUIRE(at != std::string::npos);
  const auto line_start = at == 0 ? std::string::npos : text.rfind('\n', at - 1);
  const int line = 1 + int(std::count(text.begin(), text.begin() + at, '\n'));
  const int column = int(at - (line_start == std::string::npos ? 0 : line_start + 1)) + 1;
  return {line, column};
}

// ---- table 1: scenario files -------------------------------------------------------------

struct BadScenario {
  std::string problem;             // what is wrong, for the test log
  std::string toml;                // the scenario file bad.toml
  std::string at;                  // its first occurrence is the reported line:column
  std::string key;                 // dotted key the message names ("" for TOML syntax)
  std::vector<std::string> words;  // fragments the message must contain
  std::string suggestion = {};     // "did you mean" candidate, if any
  std::optional<std::string> data = {};  // trap.csv beside the scenario
  bool at_in_data = false;         // `at` is in trap.csv, and the message names trap.csv
};

const std::vector<BadScenario>& bad_scenarios() {
  static const std::vector<BadScenario> rows = {
      // malformed TOML
      {"unterminated string", with(ion, "\"40 u\"", "\"40 u"), "\n[[potential]]", "", {"TOML syntax", "string"}},
      {"a key given twice", ion + "frequency = \"2 MHz\"\n", "\"2 MHz\"", "", {"TOML syntax", "redefine", "frequency"}},
      {"a key without '='", with(ion, "mass = ", "mass "), "\"40 u\"", "", {"TOML syntax"}},
      {"an unclosed table header", with(ion, "[particle]", "[particle"), "\nmass", "", {"TOML syntax", "expected ']'"}},
      {"a table where a key was", ion + "[particle.mass]\n", "[particle.mass]", "", {"TOML syntax"}},
      // unknown or misspelt keys, with the suggestion
      {"misspelt parameter", with(ion, "frequency =", "frequncy ="), "frequncy", "potential[1].frequncy",
       {"unknown key", "allowed in [potential[1]]"}, "frequency"},
      {"misspelt table", with(ion, "[particle]", "[partcle]"), "partcle", "partcle",
       {"unknown key", "at the top level"}, "particle"},
      {"misspelt spectrum key", ion + "[spectrum]\nlevles = 3\n", "levles", "spectrum.levles",
       {"allowed in [spectrum]"}, "levels"},
      {"misspelt change key", with(moving, "parameter = ", "paramter = "), "paramter",
       "protocol.change[1].paramter", {"unknown key"}, "parameter"},
      {"misspelt work key", moving + "[work]\nthread = 2\n", "thread =", "work.thread", {"unknown key"}, "threads"},
      {"misspelt sweep key", moving + "[sweep]\nparameter = \"protocol.duration\"\nvalue = [\"1 us\"]\n", "value =",
       "sweep.value", {"unknown key"}, "values"},
      {"misspelt shape", with(ion, "\"harmonic\"", "\"harmonik\""), "\"harmonik\"", "potential[1].shape",
       {"one of harmonic, polynomial"}, "harmonic"},
      {"misspelt unit", with(ion, "\"1 MHz\"", "\"1 Mhz\""), "\"1 Mhz\"", "potential[1].frequency",
       {"'Mhz' is not known"}, "MHz"},
      // wrong types
      {"mass as a bare number", with(ion, "\"40 u\"", "40"), "40", "particle.mass", {"with its unit"}},
      {"levels as a fraction", ion + "[spectrum]\nlevels = 2.5\n", "2.5", "spectrum.levels", {"a whole number"}},
      {"frequency as a boolean", with(ion, "\"1 MHz\"", "true"), "true", "potential[1].frequency",
       {"a frequency", "as a string with its unit"}},
      {"particle as a string", with(ion, "[particle]\nmass = \"40 u\"", "particle = \"heavy\""), "\"heavy\"",
       "particle", {"a table [particle]"}},
      {"points in quotes", ion + "[grid]\npoints = \"512\"\n", "\"512\"", "grid.points", {"a whole number"}},
      {"a switch as text", moving + "[work]\nreverse = \"no\"\n", "\"no\"", "work.reverse", {"true or false"}},
      {"potential as a single table", with(ion, "[[potential]]", "[potential]"), "[potential]", "potential",
       {"double brackets"}},
      // negative or zero mass, missing units, incompatible units
      {"negative mass", with(ion, "\"40 u\"", "\"-40 u\""), "\"-40 u\"", "particle.mass", {"a mass > 0"}},
      {"zero mass", with(ion, "\"40 u\"", "\"0 u\""), "\"0 u\"", "particle.mass", {"a mass > 0"}},
      {"mass without a unit", with(ion, "\"40 u\"", "\"40\""), "\"40\"", "particle.mass", {"with its unit"}},
      {"reference frequency without a unit", with(formula, "\"1 MHz\"", "1.0"), "1.0", "units.reference_frequency",
       {"with its unit"}},
      {"a frequency in um", with(ion, "\"1 MHz\"", "\"1 um\""), "\"1 um\"", "potential[1].frequency",
       {"a frequency", "not a length"}},
      {"a position in MHz", with(moving, "\"30 nm\"", "\"30 MHz\""), "\"30 MHz\"", "protocol.change[1].to",
       {"a length"}},
      {"a temperature in MHz", with(moving, "mean_phonons = 0.3", "temperature = \"2 MHz\""), "\"2 MHz\"",
       "initial.temperature", {"a temperature"}},
      // bare numbers for dimensional quantities (issue 14): read in internal units, which
      // change from file to file, they are refused unless [units] natural = true
      {"a temperature as a bare number (meant as kelvin)", with(moving, "mean_phonons = 0.3", "temperature = 65e-6"),
       "65e-6", "initial.temperature", {"a temperature (e.g. \"2 uK\") with its unit", "would mean", "uK", "[units] natural = true"}},
      {"a duration as a bare number", with(moving, "\"1.5 us\"", "1.5"), "1.5", "protocol.duration",
       {"a time (e.g. \"10 us\")", "[units] natural = true"}},
      {"a target position as a bare number", with(moving, "\"30 nm\"", "3"), "3\n", "protocol.change[1].to",
       {"a length", "[units] natural = true"}},
      {"a trap centre as a bare number", with(ion, "frequency = \"1 MHz\"", "frequency = \"1 MHz\"\ncentre = 2"), "2\n",
       "potential[1].centre", {"a length (e.g. \"1.5 um\")", "[units] natural = true"}},
      {"a box wall as a bare number", ion + "[box]\nleft = -1\nright = \"1 um\"\n", "-1", "box.left",
       {"a length", "[units] natural = true"}},
      {"a sweep value as a bare number", moving + "[sweep]\nparameter = \"protocol.duration\"\nvalues = [1, 2]\n", "1, 2",
       "sweep.values[1]", {"a time", "[units] natural = true"}},
      {"a resolution as a bare number", moving + "[work]\nresolution = 0.01\n", "0.01", "work.resolution",
       {"an energy", "[units] natural = true"}},
      {"a temperature as a bare number in quotes", with(moving, "mean_phonons = 0.3", "temperature = \"65e-6\""),
       "\"65e-6\"", "initial.temperature", {"with its unit", "[units] natural = true"}},
      {"natural as text", ion + "[units]\nnatural = \"yes\"\n", "\"yes\"", "units.natural", {"true or false"}},
      {"a quartic coefficient per um^3", with(ion, "\"harmonic\"", "\"polynomial\"") + "quartic = \"1 h*kHz/um^3\"\n",
       "\"1 h*kHz/um^3\"", "potential[1].quartic", {"an energy per length^4"}},
      {"negative frequency", with(ion, "\"1 MHz\"", "\"-1 MHz\""), "\"-1 MHz\"", "potential[1].frequency",
       {"a frequency > 0"}},
      // non-finite values
      {"nan as a plain number", ion + "centre = nan\n", "nan", "potential[1].centre", {"a finite number"}},
      {"inf in a unit string", with(ion, "\"1 MHz\"", "\"inf MHz\""), "\"inf MHz\"", "potential[1].frequency",
       {"finite"}},
      {"an infinite initial weight", with(moving, "mean_phonons = 0.3", "weights = [1, inf]"), "inf]",
       "initial.weights[2]", {"a finite plain number >= 0"}},
      {"a formula parameter that is nan", with(formula, "k = 2.0", "k = nan"), "nan", "potential[1].parameters.k",
       {"a finite plain number"}},
      // data files: empty, non-finite, non-monotonic x
      {"an empty table file", tabulated, "\"trap.csv\"", "potential[1].file", {"at least 2 rows of x and V in", "trap.csv (found 0)"}, {},
       std::string("# nothing measured yet\n")},
      {"a header and one row", tabulated, "\"trap.csv\"", "potential[1].file", {"at least 2 rows of x and V in", "trap.csv (found 1)"}, {},
       std::string("x_um, V_uK\n0, 1\n")},
      // issue 16: the monotone cubic is Boost.Math's pchip, which needs 4 points
      {"a table of three rows", tabulated, "\"trap.csv\"", "potential[1].file",
       {"at least 4 rows of x and V (monotone cubic interpolation; found 3)"}, {},
       std::string("x_um, V_uK\n-1, 1\n0, 0\n1, 1\n")},
      {"nan in a table row", tabulated, "nan", "potential[1].file", {"finite numbers"}, {},
       std::string("x, V\n-1, 1\n0, nan\n1, 1\n"), true},
      {"inf in a table row", tabulated, "-inf", "potential[1].file", {"finite numbers"}, {},
       std::string("-1, 1\n-inf, 0\n1, 1\n"), true},
      {"x decreasing in a table", tabulated, "0.5, 3", "potential[1].file", {"x must increase strictly"}, {},
       std::string("0, 1\n1, 2\n# a comment line\n0.5, 3\n"), true},
      {"x repeated in a table", tabulated, "1, 5", "potential[1].file", {"x must increase strictly"}, {},
       std::string("0, 1\n1, 2\n1, 5\n"), true},
      {"three fields in a row", tabulated, "3", "potential[1].file", {"two numbers per row", "3 fields", "2 fields per row"}, {},
       std::string("0, 1\n1, 2, 3\n"), true},
      // issue 14: a first row with a typo was taken for a header and lost; a header is a line with no number
      {"a typo in the first row of a table", tabulated, "1O", "potential[1].file",
       {"= 1O", "a number", "mixes numbers and text", "a header is a line with no number at all"}, {},
       std::string("-1, 1O\n0, 0\n1, 10\n"), true},
      {"a typo in the first row after a comment line", tabulated, "2.O", "potential[1].file",
       {"= 2.O", "a header is a line with no number at all"}, {},
       std::string("# x in um, V in uK\n-1, 2.O\n0, 0\n1, 10\n"), true},
      {"a table file that is missing", tabulated, "\"trap.csv\"", "potential[1].file", {"a readable data file"}},
      // formulas
      {"a formula with an unknown variable", with(formula, "0.5*k*x^2", "0.5*k*x^2 + q"), "\"0.5*k", 
       "potential[1].expression", {"named parameters", "q"}},
      {"a formula with a syntax error", with(formula, "0.5*k*x^2", "0.5*k*x^"), "\"0.5*k", "potential[1].expression",
       {"a formula of x, t and the named parameters"}},
      {"a formula that divides by zero", with(formula, "0.5*k*x^2", "0.5*k*x^2/(k-2)"), "\"0.5*k",
       "potential[1].expression", {"not finite (", ") at x = 0, t = 0", "division by zero"}},
      {"a formula parameter named x", with(formula, "k = 2.0", "x = 2.0"), "x = 2.0", "potential[1].parameters.x",
       {"other than x"}},
      {"a protocol formula with an unknown variable",
       with(moving, "to = \"30 nm\"", "ramp = \"formula\"\nformula = \"30*t/T\"\ntime_unit = \"us\"\nvalue_unit = \"nm\""),
       "\"30*t/T\"", "protocol.change[1].formula", {"T"}},
      // issue 14: soft walls ramped past each other are refused as crossing [box] walls are
      {"soft walls ramped past each other", soft_walls, "[[protocol.change]]", "protocol.change",
       {"walls.left = 0 um", "walls.right = -0.0", "cross", "ms of 4 ms", "soft walls that stay apart"}},
      // issue 14: a formula using t cannot act in a sudden switch (V is compared at t = 0 only)
      {"a formula using t with a sudden switch",
       with(formula, "0.5*k*x^2", "0.5*k*x^2*(1 + t)") +
           "[protocol]\nduration = \"0 us\"\n[[protocol.change]]\nparameter = \"f.k\"\nto = 3.0\n"
           "[initial]\nmean_phonons = 0.3\n",
       "[[protocol.change]]", "protocol.change", {"f.expression", "duration > 0", "sudden"}},
      {"a protocol formula that divides by zero",
       with(moving, "to = \"30 nm\"", "ramp = \"formula\"\nformula = \"30*t/(tau-tau)\"\ntime_unit = \"us\"\nvalue_unit = \"nm\""),
       "[[protocol.change]]", "protocol.change", {"trap.centre", "finite"}},
      // values out of range
      {"a grid whose right end is left of its left end", ion + "[grid]\nleft = \"2 um\"\nright = \"1 um\"\n", "\"1 um\"",
       "grid.right", {"larger than grid.left"}},
      {"a negative duration", with(moving, "\"1.5 us\"", "\"-1 us\""), "\"-1 us\"", "protocol.duration",
       {"a duration >= 0"}},
      {"a negative initial level", with(moving, "mean_phonons = 0.3", "level = -1"), "-1", "initial.level",
       {"a whole number from 0"}},
      {"a thermal tolerance of 2", moving + "[work]\nthermal_tolerance = 2\n", "2\n", "work.thermal_tolerance",
       {"between 0 and 1"}},
      {"a sweep with one point", moving + "[sweep]\nparameter = \"protocol.duration\"\nfrom = \"1 us\"\nto = \"2 us\"\npoints = 1\n",
       "1\n", "sweep.points", {"a whole number from 2"}},
      {"an empty list of sweep values", moving + "[sweep]\nparameter = \"protocol.duration\"\nvalues = []\n", "[]",
       "sweep.values", {"an array of values"}},
      {"two initial states", with(moving, "mean_phonons = 0.3", "mean_phonons = 0.3\nlevel = 0"), "level = 0",
       "initial.level", {"only one initial state"}},
  };
  return rows;
}

}  // namespace

TEST_CASE("bad scenario files: each message names file:line:column, the key and what is wrong", "[bad-inputs]") {
  const fs::path dir = trapwork_test::scratch_dir("test-bad-inputs", "scenarios");
  const std::string scenario_file = (dir / "bad.toml").string();
  const std::string data_file = (dir / "trap.csv").string();
  for (const BadScenario& c : bad_scenarios()) {
    INFO("case: " << c.problem << "\n" << c.toml << (c.data ? "\ntrap.csv:\n" + *c.data : std::string()));
    fs::remove(dir / "trap.csv");
    if (c.data) std::ofstream(dir / "trap.csv") << *c.data;
    std::optional<InputError> error;
    try {
      (void)read_scenario_text(c.toml, scenario_file);
    } catch (const InputError& e) {
      error = e;
    }
    REQUIRE(error);
    const auto [line, column] = position_of(c.at_in_data ? *c.data : c.toml, c.at);
    const std::string file = c.at_in_data ? data_file : scenario_file;
    const std::string where = file + ":" + std::to_string(line) + ":" + std::to_string(column) + ": ";
    INFO("message: " << error->what());
    REQUIRE_THAT(error->what(), Catch::StartsWith(where + c.key));
    REQUIRE(error->key == c.key);
    for (const auto& w : c.words) REQUIRE_THAT(error->what(), Catch::Contains(w));
    if (!c.suggestion.empty())
      REQUIRE_THAT(error->what(), Catch::EndsWith("(did you mean '" + c.suggestion + "'?)"));
    else
      REQUIRE_THAT(error->what(), !Catch::Contains("did you mean"));
  }
}

TEST_CASE("the catalogue of bad scenarios covers at least 40 distinct cases", "[bad-inputs]") {
  std::vector<std::string> texts;
  for (const BadScenario& c : bad_scenarios()) texts.push_back(c.problem);
  std::sort(texts.begin(), texts.end());
  CHECK(std::adjacent_find(texts.begin(), texts.end()) == texts.end());  // every row has its own name
  CHECK(texts.size() >= 40);
}

namespace {

// ---- table 2: valid scenarios the physics cannot use ------------------------------------

enum class Run { spectrum, work };
struct BadPhysics {
  std::string problem;
  std::string toml;
  Run run;
  bool error;                      // PhysicsError (true) or a warning in the result (false)
  std::vector<std::string> words;  // fragments of the error or of one warning
  std::string value_after = {};    // a warning: this fragment is followed by its diagnostic value
};

const std::vector<BadPhysics>& bad_physics() {
  static const std::vector<BadPhysics> rows = {
      {"more levels than grid points", ion + "[spectrum]\nlevels = 20\n[grid]\npoints = 8\nleft = \"-0.1 um\"\nright = \"0.1 um\"\n",
       Run::spectrum, true, {"asked for 20 levels on a grid of 8"}},
      {"an inverted trap that confines nothing",
       with(ion, "shape = \"harmonic\"\nfrequency = \"1 MHz\"", "shape = \"polynomial\"\nfrequency = \"0 MHz\"\nquartic = \"-1 h*kHz/um^4\""),
       Run::spectrum, true, {"does not confine"}},
      {"a shallow tweezer asked for more levels than it binds", R"([particle]
mass = "87 u"
[units]
length = "1 um"
[[potential]]
shape = "gaussian"
depth = "0.05 kB*uK"
waist = "0.8 um"
[spectrum]
levels = 12
)",
       Run::spectrum, false, {"of 12 levels lie above the potential's threshold", "not bound"}},
      {"a grid that cuts the states", ion + "[grid]\npoints = 64\nleft = \"-15 nm\"\nright = \"15 nm\"\nconvergence_check = false\n",
       Run::spectrum, false, {"a bound state reaches the grid edge"}, "relative density "},
      {"the Hermite basis for a Gaussian", with(ion, "shape = \"harmonic\"\nfrequency = \"1 MHz\"",
                                                  "shape = \"gaussian\"\ndepth = \"1 h*MHz\"\nwaist = \"0.1 um\"") +
                                               "[units]\nlength = \"10 nm\"\n[spectrum]\nmethod = \"hermite\"\n",
       Run::spectrum, true, {"method = \"hermite\"", "harmonic and polynomial"}},
      {"a time step too long for the energy range", moving + "[work]\nsteps = 16\n", Run::work, false,
       {"at half the time step: raise steps (now 16)"}, "line probabilities change by "},
      {"a protocol far too long to step through (1e30 s: past an int of steps)",
       with(moving, "\"1.5 us\"", "\"1e30 s\""), Run::work, true,
       {"split-operator steps", "more than the 1e+09 a run may take", "shorten [protocol] duration"}},
      {"a frequency ramp of 1e30 s through the eigenbasis ODE (it took adaptive steps for ever, silently)",
       with(with(moving, "\"1.5 us\"", "\"1e30 s\""), "parameter = \"trap.centre\"\nto = \"30 nm\"",
            "parameter = \"trap.frequency\"\nto = \"2 MHz\"") +
           "[work]\nintegrator = \"eigenbasis\"\n",
       Run::work, true,
       {"eigenbasis ODE: at its pace so far", "more than the 6e+09 a run may take", "shorten [protocol] duration"}},
      {"an initial level the grid does not hold",
       with(moving, "mean_phonons = 0.3", "level = 30") + "[grid]\npoints = 32\nleft = \"-0.1 um\"\nright = \"0.1 um\"\n",
       Run::work, true, {"levels on a grid of 32 points", "use more points"}},
  };
  return rows;
}

// A number at the start of `text` (the diagnostic value after its label).
std::optional<double> leading_number(const std::string& text) {
  char* end = nullptr;
  const double v = std::strtod(text.c_str(), &end);
  if (end == text.c_str()) return std::nullopt;
  return v;
}

}  // namespace

TEST_CASE("valid scenarios the physics cannot use: a named error or a warning with its value", "[bad-inputs]") {
  for (const BadPhysics& c : bad_physics()) {
    INFO("case: " << c.problem << "\n" << c.toml);
    const Scenario s = read_scenario_text(c.toml, "physics.toml");
    std::vector<std::string> warnings;
    std::optional<std::string> error;
    try {
      if (c.run == Run::spectrum) {
        warnings = compute_spectrum(s.potential, s.spectrum).warnings;
      } else {
        WorkRequest request = work_request(s);
        request.threads = 1;
        warnings = run_work(s.potential, build_protocol(s), request).diagnostics.warnings;
      }
    } catch (const PhysicsError& e) {
      error = e.what();
    }
    if (c.error) {
      REQUIRE(error);
      INFO("message: " << *error);
      for (const auto& w : c.words) REQUIRE_THAT(*error, Catch::Contains(w));
      continue;
    }
    REQUIRE_FALSE(error);
    std::string all;
    for (const auto& w : warnings) all += w + "\n";
    INFO("warnings:\n" << all);
    const auto it = std::find_if(warnings.begin(), warnings.end(), [&](const std::string& w) {
      return std::all_of(c.words.begin(), c.words.end(), [&](const std::string& f) { return w.find(f) != w.npos; });
    });
    REQUIRE(it != warnings.end());
    if (!c.value_after.empty()) {
      const auto at = it->find(c.value_after);
      REQUIRE(at != std::string::npos);
      const auto value = leading_number(it->substr(at + c.value_after.size()));
      REQUIRE(value);
      REQUIRE(*value > 0);  // the size of the problem, never a placeholder zero
    }
  }
}

namespace {

// ---- table 3: whole command lines --------------------------------------------------------

struct BadCommand {
  std::string problem;
  std::string arguments;                     // after `trapwork`, run in a scratch folder
  std::map<std::string, std::string> files;  // written into the folder first
  int exit_status;
  std::vector<std::string> words;  // fragments of stderr
};

const std::vector<BadCommand>& bad_commands() {
  static const std::vector<BadCommand> rows = {
      {"a misspelt key", "spectrum bad.toml -o out",
       {{"bad.toml", "[particle]\nmass = \"40 u\"\n[[potential]]\nshape = \"harmonic\"\nfrequncy = \"1 MHz\"\n"}}, 2,
       {"trapwork: error: bad.toml:5:1: potential[1].frequncy", "did you mean 'frequency'?"}},
      {"a scenario that does not exist", "spectrum missing.toml -o out", {}, 2,
       {"trapwork: error: missing.toml", "cannot open"}},
      {"a folder named as the scenario", "spectrum folder.toml -o out", {{"folder.toml/x", ""}}, 2,
       {"trapwork: error: folder.toml: cannot open the scenario file: it is a folder"}},
      {"binary garbage as the scenario", "spectrum noise.toml -o out", {{"noise.toml", std::string("\x01\xff\xfe[[\x00=", 7)}},
       2, {"trapwork: error: noise.toml:1:", "TOML syntax"}},
      {"more levels than grid points", "spectrum small.toml -o out",
       {{"small.toml", ion + "[spectrum]\nlevels = 20\n[grid]\npoints = 8\nleft = \"-0.1 um\"\nright = \"0.1 um\"\n"}}, 2,
       {"trapwork: error: small.toml: ", "asked for 20 levels on a grid of 8"}},
      {"work without [protocol]", "work still.toml -o out", {{"still.toml", ion + "[initial]\nmean_phonons = 0.3\n"}}, 2,
       {"trapwork: error: still.toml: protocol = missing", "[protocol]", "the spectrum of this trap alone needs none"}},
      {"sweep without [sweep]", "sweep move.toml -o out", {{"move.toml", moving}}, 2,
       {"trapwork: error: move.toml", "sweep", "a [sweep] table"}},
      {"a command-line value out of range", "sweep move.toml --jobs 0 -o out", {{"move.toml", moving}}, 2,
       {"--jobs"}},
      {"an unknown command", "spectra default -o out", {}, 2,
       {"trapwork: error: command = spectra: one of spectrum, work, sweep", "(did you mean 'spectrum'?)"}},
      {"a work scenario with a unit error", "work bad.toml -o out",
       {{"bad.toml", with(moving, "\"30 nm\"", "\"30 MHz\"")}}, 2,
       {"trapwork: error: bad.toml:12:6: protocol.change[1].to", "a length"}},
  };
  return rows;
}

}  // namespace

TEST_CASE("bad command lines exit with their status, say why on stderr and write nothing", "[bad-inputs][cli]") {
  const fs::path binary = fs::path(TRAPWORK_BINARY_DIR) / "trapwork";
  int index = 0;
  for (const BadCommand& c : bad_commands()) {
    INFO("case: " << c.problem << ": trapwork " << c.arguments);
    const fs::path dir = trapwork_test::scratch_dir("test-bad-inputs", "command-" + std::to_string(++index));
    for (const auto& [name, text] : c.files) {
      fs::create_directories((dir / name).parent_path());
      std::ofstream(dir / name, std::ios::binary) << text;
    }
    const std::string command =
        "cd '" + dir.string() + "' && '" + binary.string() + "' " + c.arguments + " > stdout.txt 2> stderr.txt";
    const int status = std::system(command.c_str());
    REQUIRE(WIFEXITED(status));
    const std::string err = trapwork_test::read_all(dir / "stderr.txt");
    INFO("stderr: " << err);
    REQUIRE(WEXITSTATUS(status) == c.exit_status);
    for (const auto& w : c.words) REQUIRE_THAT(err, Catch::Contains(w));
    REQUIRE_FALSE(fs::exists(dir / "out"));  // no output folder, no half-written file
  }
}

TEST_CASE("a protocol of 1e30 s with its steps set: the harmonic reference says why it is absent",
          "[bad-inputs]") {
  // Its reference ODE followed every trap period (1e36 of them) and never returned.
  const std::string text = with(moving, "\"1.5 us\"", "\"1e30 s\"") + "[work]\nsteps = 16\n";
  const Scenario s = read_scenario_text(text, "long.toml");
  WorkRequest request = work_request(s);
  request.threads = 1;
  const WorkResult r = run_work(s.potential, build_protocol(s), request);
  INFO(r.harmonic_absent);
  CHECK_FALSE(r.harmonic);
  CHECK_THAT(r.harmonic_absent, Catch::Contains("periods of the harmonic part, more than the 1e+06"));
  const std::string std_warnings = joined(r.diagnostics.warnings);
  INFO(std_warnings);
  CHECK_THAT(std_warnings, Catch::Contains("at half the time step: raise steps (now 16)"));
}

TEST_CASE("a shuttle faster than the co-moving grid holds: the automatic frame is the lab's", "[bad-inputs]") {
  // 30 nm in 10 ns (a 40 u ion, 1 MHz): the frame's momentum m d/tau is about 1.8 times pi hbar/dx
  // of the co-moving grid, whose states then wrapped around in momentum: <W> came out 6.9 h*kHz
  // with every check passing, where the displaced oscillator gives 1780 h*kHz.
  const std::string text = with(moving, "\"1.5 us\"", "\"10 ns\"");
  const Scenario s = read_scenario_text(text, "fast.toml");
  WorkRequest request = work_request(s);
  request.threads = 1;
  const WorkResult r = run_work(s.potential, build_protocol(s), request);
  CHECK_FALSE(r.co_moving);
  const std::string notes = joined(r.diagnostics.notes);
  INFO(notes);
  CHECK_THAT(notes, Catch::Contains("lab frame: the co-moving frame's momentum"));
  // the displaced oscillator (Cahill & Glauber 1969), exact for this harmonic trap
  REQUIRE(r.harmonic);
  CHECK_THAT(r.distribution.mean, Catch::Matchers::WithinRel(r.harmonic->mean_work, 1e-6));

  // asked for by name, the frame is kept and the result carries a warning with its value
  request.co_moving = true;
  const WorkResult c = run_work(s.potential, build_protocol(s), request);
  CHECK(c.co_moving);
  const std::string warnings = joined(c.diagnostics.warnings);
  INFO(warnings);
  CHECK_THAT(warnings, Catch::Contains("of the grid's range pi hbar/dx, above 0.5"));
}
