// Scenario edits (solver/scenario/scenario_edit.hpp), issue 15: values changed in the TOML text
// in place, checked through what read_scenario_text makes of the result (internal units) and
// through the lines that must stay byte-identical; scenarios written from JSON.
#include <toml++/toml.h>

#include <catch2/catch.hpp>
#include <cmath>
#include <fstream>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/scenario_edit.hpp"

using namespace trapwork;
using Json = nlohmann::json;

namespace {

std::string example(const std::string& name) {
  std::ifstream in(std::string(TRAPWORK_SOURCE_DIR) + "/examples/" + name);
  REQUIRE(in);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> out;
  std::string line;
  std::istringstream in(text);
  while (std::getline(in, line)) out.push_back(line);
  return out;
}

// Line number (from 1) of the first line starting with `start`; 0 if none.
std::size_t line_of(const std::string& text, const std::string& start) {
  const auto lines = lines_of(text);
  for (std::size_t i = 0; i < lines.size(); ++i)
    if (lines[i].rfind(start, 0) == 0) return i + 1;
  return 0;
}

// The edit kept the line count and changed only the lines listed (numbers from 1); returns them.
std::vector<std::string> changed_in_place(const std::string& before, const std::string& after,
                                          const std::vector<std::size_t>& changed) {
  const auto a = lines_of(before), b = lines_of(after);
  REQUIRE(a.size() == b.size());
  std::vector<std::string> out;
  for (std::size_t i = 0; i < a.size(); ++i) {
    const bool listed = std::find(changed.begin(), changed.end(), i + 1) != changed.end();
    if (listed) {
      CHECK(a[i] != b[i]);
      out.push_back(b[i]);
    } else {
      INFO("line " << i + 1);
      CHECK(a[i] == b[i]);
    }
  }
  return out;
}

// One line inserted after line `after` (from 1); the others identical. Returns the new line.
std::string inserted_after(const std::string& before, const std::string& edited, std::size_t after) {
  const auto a = lines_of(before), b = lines_of(edited);
  REQUIRE(b.size() == a.size() + 1);
  for (std::size_t i = 0; i < a.size(); ++i) {
    INFO("line " << i + 1);
    CHECK(a[i] == b[i < after ? i : i + 1]);
  }
  return b[after];
}

InputError edit_error(const std::string& text, const Json& values) {
  try {
    scenario_text_with_values(text, "scenario.toml", values);
  } catch (const InputError& e) {
    return e;
  }
  FAIL("no InputError for " << values.dump());
  throw;
}

double internal(const Scenario& s, const std::string& text, Dimension d) {
  return s.units.to_internal(parse_quantity(text), d);
}

}  // namespace

TEST_CASE("issue 15: table.key values of the built-in scenario are replaced on their own lines",
          "[scenario_edit]") {
  const std::string text(default_scenario_text());
  const std::size_t duration = line_of(text, "duration"), levels = line_of(text, "levels"),
                    mass = line_of(text, "mass"), phonons = line_of(text, "mean_phonons");
  const std::string edited = scenario_text_with_values(text, "default",
                                                       {{"protocol.duration", "3 us"},
                                                        {"spectrum.levels", 25},
                                                        {"particle.mass", "24 u"},
                                                        {"initial.mean_phonons", 0.5}});
  const auto lines = changed_in_place(text, edited, {duration, levels, mass, phonons});
  CHECK(lines == std::vector<std::string>{"mass = \"24 u\"", "levels = 25", "duration = \"3 us\"",
                                          "mean_phonons = 0.5"});

  const Scenario s = read_scenario_text(edited, "default");
  CHECK(s.units.mass_kg ==
        Approx(24 * 1.66053906660e-27).epsilon(1e-9));  // atomic mass constant, CODATA 2018
  REQUIRE(s.protocol);
  CHECK(s.protocol->duration == Approx(3e-6 / s.units.time_s()).epsilon(1e-12));
  CHECK(s.spectrum.options.levels == 25);
  REQUIRE(s.work);
  CHECK(s.work->request.initial.kind() == InitialState::Kind::phonons);
  CHECK(s.work->request.initial.parameter() == 0.5);
}

TEST_CASE("issue 15: term parameters by name and by number, and change keys", "[scenario_edit]") {
  const std::string text(default_scenario_text());
  const std::size_t frequency = line_of(text, "frequency"), quartic = line_of(text, "quartic"),
                    to = line_of(text, "to ="), ramp = line_of(text, "ramp");
  SECTION("trap.quartic and potential[1].frequency") {
    const std::string edited = scenario_text_with_values(
        text, "default", {{"trap.quartic", "0.02 h*Hz/nm^4"}, {"potential[1].frequency", "1.2 MHz"}});
    changed_in_place(text, edited, {frequency, quartic});
    const Scenario s = read_scenario_text(edited, "default");
    CHECK(s.potential.parameter("trap.frequency") ==
          Approx(2 * M_PI * 1.2e6 * s.units.time_s()).epsilon(1e-12));
    CHECK(s.potential.parameter("trap.quartic") ==
          Approx(internal(s, "0.02 h*Hz/nm^4", Dimension::energy_per_length(4))).epsilon(1e-12));
    CHECK(s.potential.parameter("trap.quartic") != 0);
  }
  SECTION("a term named like a table the scenario does not have") {
    std::string renamed = text;
    renamed.replace(renamed.find("name = \"trap\""), 13, "name = \"work\"");
    renamed.replace(renamed.find("\"trap.centre\""), 13, "\"work.centre\"");
    const std::string edited = scenario_text_with_values(renamed, "default", {{"work.frequency", "2 MHz"}});
    changed_in_place(renamed, edited, {frequency});
    const Scenario s = read_scenario_text(edited, "default");
    CHECK(s.potential.parameter("work.frequency") ==
          Approx(2 * M_PI * 2e6 * s.units.time_s()).epsilon(1e-12));
  }
  SECTION("change[1].to and protocol.change[1].ramp") {
    const std::string edited = scenario_text_with_values(
        text, "default", {{"change[1].to", "200 nm"}, {"protocol.change[1].ramp", "smooth"}});
    changed_in_place(text, edited, {to, ramp});
    const Scenario s = read_scenario_text(edited, "default");
    REQUIRE(s.protocol->changes.size() == 1);
    CHECK(s.protocol->changes[0].to == Approx(200e-9 / s.units.length_m).epsilon(1e-12));
    CHECK(s.protocol->changes[0].form == ScheduleForm::smooth_step);
  }
  SECTION("protocol.change[1].to, the same key by its full address") {
    const std::string edited =
        scenario_text_with_values(text, "default", {{"protocol.change[1].to", "-80 nm"}});
    CHECK(changed_in_place(text, edited, {to}) == std::vector<std::string>{"to = \"-80 nm\""});
    CHECK(read_scenario_text(edited, "default").protocol->changes[0].to ==
          Approx(-80e-9 / read_scenario_text(edited, "default").units.length_m).epsilon(1e-12));
  }
}

TEST_CASE("issue 15: the examples' box walls, sweep values and exclusive [initial] keys", "[scenario_edit]") {
  SECTION("box.left") {
    const std::string text = example("box_expansion.toml");
    const std::string edited = scenario_text_with_values(text, "box_expansion.toml", {{"box.left", "-1 um"}});
    changed_in_place(text, edited, {line_of(text, "left")});
    const Scenario s = read_scenario_text(edited, "box_expansion.toml");
    REQUIRE(s.spectrum.box);
    CHECK(s.spectrum.box->first == Approx(-1e-6 / s.units.length_m).epsilon(1e-12));
  }
  SECTION("sweep.values takes the line of from; to and points are emptied") {
    const std::string text = example("ion_sweep.toml");
    const std::size_t from = line_of(text, "from"), to = from + 1, points = line_of(text, "points");
    REQUIRE(lines_of(text)[to - 1] == "to = \"6 us\"");
    const std::string edited = scenario_text_with_values(text, "ion_sweep.toml",
                                                         {{"sweep.values", Json::array({"1 us", "2.5 us"})}});
    CHECK(changed_in_place(text, edited, {from, to, points}) ==
          std::vector<std::string>{"values = [\"1 us\", \"2.5 us\"]", "", ""});
    const Scenario s = read_scenario_text(edited, "ion_sweep.toml");
    REQUIRE(s.sweep);
    REQUIRE(s.sweep->axes[0].values.size() == 2);
    CHECK(s.sweep->axes[0].values[1] == Approx(2.5e-6 / s.units.time_s()).epsilon(1e-12));
  }
  SECTION("initial.mean_phonons replaces temperature on its line") {
    const std::string text = example("ion_translation.toml");
    const std::string edited =
        scenario_text_with_values(text, "ion_translation.toml", {{"initial.mean_phonons", 2}});
    CHECK(changed_in_place(text, edited, {line_of(text, "temperature")}) ==
          std::vector<std::string>{"mean_phonons = 2"});
    const Scenario s = read_scenario_text(edited, "ion_translation.toml");
    CHECK(s.work->request.initial.kind() == InitialState::Kind::phonons);
    CHECK(s.work->request.initial.parameter() == 2);
  }
  SECTION("initial.level on a multi-line weights array, then the array replaced whole") {
    const std::string text =
        std::string(default_scenario_text())
            .replace(std::string(default_scenario_text()).find("mean_phonons = 2"), 16,
                     "weights = [\n  0.5,\n  0.5,\n]  # two levels\n[work]\nsteps = 300");
    const std::size_t weights = line_of(text, "weights");
    REQUIRE(read_scenario_text(text, "w.toml").work->request.initial.kind() == InitialState::Kind::mixture);
    const std::string level = scenario_text_with_values(text, "w.toml", {{"initial.level", 1}});
    CHECK(changed_in_place(text, level, {weights, weights + 1, weights + 2, weights + 3}) ==
          std::vector<std::string>{"level = 1", "", "", "  # two levels"});
    const Scenario s = read_scenario_text(level, "w.toml");
    CHECK(s.work->request.initial.kind() == InitialState::Kind::eigenstate);
    CHECK(s.work->request.initial.level() == 1);
    CHECK(s.work->request.steps == 300);

    const std::string mixed =
        scenario_text_with_values(text, "w.toml", {{"initial.weights", Json::array({0.25, 0.75})}});
    CHECK(changed_in_place(text, mixed, {weights, weights + 1, weights + 2, weights + 3}) ==
          std::vector<std::string>{"weights = [0.25, 0.75]", "", "", "  # two levels"});
    CHECK(read_scenario_text(mixed, "w.toml").work->request.initial.mixture_weights() ==
          std::vector<double>{0.25, 0.75});
  }
  SECTION("two exclusive keys at once are refused") {
    const InputError e =
        edit_error(example("ion_translation.toml"), {{"initial.level", 0}, {"initial.temperature", "1 uK"}});
    CHECK(std::string(e.what()).find("not together with initial.") != std::string::npos);
  }
}

TEST_CASE("issue 15: a missing key is inserted after its table's last key, a missing table appended",
          "[scenario_edit]") {
  SECTION("a key of an existing [work]") {
    const std::string text = example("tweezer_deform.toml");
    const std::string edited = scenario_text_with_values(text, "tweezer_deform.toml", {{"work.steps", 500}});
    CHECK(inserted_after(text, edited, line_of(text, "final_margin")) == "steps = 500");
    const Scenario s = read_scenario_text(edited, "tweezer_deform.toml");
    CHECK(s.work->request.steps == 500);
    CHECK(s.work->request.final_margin == 10);
  }
  SECTION("a parameter missing from its [[potential]] table goes before the next header") {
    const std::string text(default_scenario_text());
    const std::string edited =
        scenario_text_with_values(text, "default", {{"trap.cubic", "-0.05 h*Hz/nm^3"}});
    CHECK(inserted_after(text, edited, line_of(text, "quartic")) == "cubic = \"-0.05 h*Hz/nm^3\"");
    const Scenario s = read_scenario_text(edited, "default");
    CHECK(s.potential.parameter("trap.cubic") ==
          Approx(internal(s, "-0.05 h*Hz/nm^3", Dimension::energy_per_length(3))).epsilon(1e-12));
  }
  SECTION("a table missing entirely is appended; the file's lines are unchanged") {
    const std::string text = example("ion_translation.toml");
    const std::string edited = scenario_text_with_values(
        text, "ion_translation.toml",
        {{"work.steps", 400}, {"work.thermal_tolerance", 1e-8}, {"grid.points", 512}});
    const auto a = lines_of(text), b = lines_of(edited);
    REQUIRE(b.size() > a.size());
    CHECK(std::equal(a.begin(), a.end(), b.begin()));
    CHECK(edited.substr(text.size()) ==
          "\n[grid]\npoints = 512\n\n[work]\nsteps = 400\nthermal_tolerance = 1e-08\n");
    const Scenario s = read_scenario_text(edited, "ion_translation.toml");
    CHECK(s.work->request.steps == 400);
    CHECK(s.work->request.thermal_tolerance == 1e-8);  // shortest round-trip text reads back exactly
    CHECK(s.spectrum.points == std::size_t(512));
  }
  SECTION("a top-level key and a string with quotes and a backslash") {
    const std::string text = example("double_well.toml");
    const std::string title = "wells \"A\" \\ B\té";
    const std::string edited = scenario_text_with_values(text, "double_well.toml", {{"title", title}});
    changed_in_place(text, edited, {line_of(text, "title")});
    CHECK(read_scenario_text(edited, "double_well.toml").title == title);
    const std::string described =
        scenario_text_with_values(text, "double_well.toml", {{"description", "two wells"}});
    CHECK(inserted_after(text, described, line_of(text, "title")) == "description = \"two wells\"");
    CHECK(read_scenario_text(described, "double_well.toml").description == "two wells");
  }
}

TEST_CASE("issue 15: formula parameters in [potential.parameters]", "[scenario_edit]") {
  const std::string text = R"([particle]
mass = "40 u"
[units]
reference_frequency = "1 MHz"
[[potential]]
name = "written"
shape = "formula"
expression = "0.5*k*x^2"
x_unit = "um"
energy_unit = "h*kHz"
[potential.parameters]
k = 2.5
)";
  for (const std::string address : {"written.parameters.k", "potential[1].parameters.k"}) {
    const std::string edited = scenario_text_with_values(text, "formula.toml", {{address, 3.5}});
    CHECK(changed_in_place(text, edited, {12}) == std::vector<std::string>{"k = 3.5"});
    CHECK(read_scenario_text(edited, "formula.toml").potential.parameter("written.k") == 3.5);
  }
}

TEST_CASE("issue 15: unknown addresses name the address and value and suggest the closest",
          "[scenario_edit]") {
  const std::string text(default_scenario_text());
  const InputError misspelt = edit_error(text, {{"trapp.quartic", "1 h*Hz/nm^4"}});
  CHECK(misspelt.key == "trapp.quartic");
  CHECK(misspelt.found == "\"1 h*Hz/nm^4\"");
  CHECK(misspelt.suggestion == "trap.quartic");
  CHECK(std::string(misspelt.what()).find("did you mean 'trap.quartic'") != std::string::npos);

  const InputError table = edit_error(text, {{"protocl.duration", "1 us"}});
  CHECK(table.suggestion == "protocol.duration");

  const InputError range = edit_error(text, {{"potential[2].frequency", "1 MHz"}});
  CHECK(range.key == "potential[2].frequency");
  CHECK(std::string(range.what()).find("it has 1 [[potential]] table") != std::string::npos);
  CHECK(range.suggestion == "potential[1].frequency");

  const InputError change = edit_error(text, {{"change[3].to", "1 nm"}});
  CHECK(change.key == "change[3].to");
  CHECK(std::string(change.what()).find("1 [[protocol.change]] table") != std::string::npos);

  const InputError nothing = edit_error(text, {{"nosuch.key", 1}});
  CHECK(nothing.key == "nosuch.key");
  CHECK(nothing.found == "1");

  CHECK(edit_error(text, {{"particle", "40 u"}}).key == "particle");
  CHECK(edit_error(text, {{"trap.frequency", nullptr}}).key == "trap.frequency");
  CHECK(edit_error(text, {{"potential.frequency", "1 MHz"}}).key == "potential.frequency");
  CHECK(edit_error(text, {{"trap[1].frequency", "1 MHz"}}).key == "trap[1].frequency");
}

TEST_CASE("issue 15: an invalid value is refused by the reader at its line of the user's file",
          "[scenario_edit]") {
  const std::string text = example("ion_translation.toml");
  const std::string edited = scenario_text_with_values(text, "ion_translation.toml",
                                                       {{"trap.frequency", "-1 MHz"}, {"work.steps", 100}});
  try {
    read_scenario_text(edited, "ion_translation.toml");
    FAIL("a negative frequency was read");
  } catch (const InputError& e) {
    CHECK(e.file == "ion_translation.toml");
    CHECK(e.line == int(line_of(text, "frequency")));
    CHECK(e.key == "potential[1].frequency");
    CHECK(e.found == "\"-1 MHz\"");
  }
  // A float where the reader wants a whole number stays a float (JSON 256.0 is not 256).
  const std::string points =
      scenario_text_with_values(text, "ion_translation.toml", {{"grid.points", 256.0}});
  CHECK(points.find("points = 256.0") != std::string::npos);
  CHECK_THROWS_AS(read_scenario_text(points, "ion_translation.toml"), InputError);
}

TEST_CASE("issue 15: scenario_text_from_json reads to the same scenario as the file", "[scenario_edit]") {
  // examples/ion_translation.toml as JSON, keys in another order than the file.
  const Json json = {
      {"initial", {{"temperature", "20 uK"}}},
      {"protocol",
       {{"duration", "1.6 us"},
        {"change", Json::array({{{"parameter", "trap.centre"}, {"ramp", "smooth"}, {"to", "50 nm"}}})}}},
      {"potential", Json::array({{{"name", "trap"},
                                  {"shape", "polynomial"},
                                  {"frequency", "1.5 MHz"},
                                  {"cubic", "-0.05 h*Hz/nm^3"},
                                  {"quartic", "0.01 h*Hz/nm^4"}}})},
      {"units", {{"energy", "h*kHz"}}},
      {"particle", {{"mass", "24 u"}}},
      {"title", "24 u ion, 1.5 MHz trap, smooth 50 nm shuttle in 1.6 us at 20 uK"}};
  const std::string text = scenario_text_from_json(json);
  CHECK(text.find("[[protocol.change]]") != std::string::npos);
  CHECK(text.find("[[potential]]") != std::string::npos);
  CHECK(text.rfind("title = ", 0) == 0);
  const Scenario a = read_scenario(std::string(TRAPWORK_SOURCE_DIR) + "/examples/ion_translation.toml");
  const Scenario b = read_scenario_text(text, "ion_translation.toml");
  CHECK(a.title == b.title);
  CHECK(a.units.mass_kg == b.units.mass_kg);
  CHECK(a.units.length_m == b.units.length_m);
  CHECK(a.energy.name == b.energy.name);
  REQUIRE(a.terms.size() == b.terms.size());
  REQUIRE(a.parameters.size() == b.parameters.size());
  for (const auto& p : a.parameters) {
    INFO(p.address);
    CHECK(a.potential.parameter(p.address) == b.potential.parameter(p.address));
  }
  CHECK(b.potential.parameter("trap.cubic") != 0);
  REQUIRE(b.protocol);
  CHECK(a.protocol->duration == b.protocol->duration);
  REQUIRE(b.protocol->changes.size() == 1);
  CHECK(a.protocol->changes[0].parameter == b.protocol->changes[0].parameter);
  CHECK(a.protocol->changes[0].form == b.protocol->changes[0].form);
  CHECK(a.protocol->changes[0].to == b.protocol->changes[0].to);
  REQUIRE(b.work);
  CHECK(a.work->request.initial.kind() == b.work->request.initial.kind());
  CHECK(a.work->request.initial.parameter() == b.work->request.initial.parameter());
  CHECK(a.work->request.steps == b.work->request.steps);
  CHECK(a.work->request.thermal_tolerance == b.work->request.thermal_tolerance);
  CHECK(a.work->frame == b.work->frame);
}

TEST_CASE("issue 15: scenario_text_from_json writes sub-tables and refuses null", "[scenario_edit]") {
  const Json json = {{"particle", {{"mass", "40 u"}}},
                     {"units", {{"reference_frequency", "1 MHz"}}},
                     {"potential", Json::array({{{"name", "written"},
                                                 {"shape", "formula"},
                                                 {"expression", "0.5*k*x^2"},
                                                 {"x_unit", "um"},
                                                 {"energy_unit", "h*kHz"},
                                                 {"parameters", {{"k", 2.5}}}}})},
                     {"spectrum", {{"levels", 8}}}};
  const std::string text = scenario_text_from_json(json);
  CHECK(text.find("[potential.parameters]\nk = 2.5\n") != std::string::npos);
  const Scenario s = read_scenario_text(text, "json");
  CHECK(s.potential.parameter("written.k") == 2.5);
  CHECK(s.spectrum.options.levels == 8);
  // And edited afterwards through the nested address.
  CHECK(read_scenario_text(scenario_text_with_values(text, "json", {{"written.parameters.k", 4}}), "json")
            .potential.parameter("written.k") == 4);

  try {
    scenario_text_from_json({{"particle", {{"mass", nullptr}}}});
    FAIL("null was written");
  } catch (const InputError& e) {
    CHECK(e.key == "particle.mass");
  }
  CHECK_THROWS_AS(scenario_text_from_json(Json::array({1, 2})), InputError);
  // An unknown key reaches the reader, which names it.
  try {
    read_scenario_text(scenario_text_from_json({{"particle", {{"mass", "40 u"}, {"charge", 1}}}}), "json");
    FAIL("an unknown key was read");
  } catch (const InputError& e) {
    CHECK(e.key == "particle.charge");
  }
}

TEST_CASE("issue 15: edits in sub-tables, dotted keys, CRLF lines and a text without a last line break",
          "[scenario_edit]") {
  SECTION("a missing sub-table becomes a dotted key of its table") {
    const std::string text = example("box_expansion.toml");
    const std::string widths = scenario_text_with_values(
        text, "box_expansion.toml", {{"box.soft_walls.widths", Json::array({"0.1 um"})}});
    CHECK(inserted_after(text, widths, line_of(text, "right")) == "soft_walls.widths = [\"0.1 um\"]");
    const std::string edited =
        scenario_text_with_values(widths, "box_expansion.toml", {{"box.soft_walls.height", "100 kB*nK"}});
    CHECK(inserted_after(widths, edited, line_of(text, "right") + 1) == "soft_walls.height = \"100 kB*nK\"");
    const Scenario s = read_scenario_text(edited, "box_expansion.toml");
    REQUIRE(s.soft_walls);
    REQUIRE(s.soft_widths_given == std::vector<std::string>{"0.1 um"});
    // ... and is then edited in place through the same address.
    const std::string again = scenario_text_with_values(edited, "box_expansion.toml",
                                                        {{"box.soft_walls.widths", Json::array({"0.2 um"})}});
    changed_in_place(edited, again, {line_of(text, "right") + 1});
    CHECK(read_scenario_text(again, "box_expansion.toml").soft_widths_given ==
          std::vector<std::string>{"0.2 um"});
  }
  SECTION("a table made by a deeper header is opened at the end; one made by dotted keys gets a dotted key") {
    const std::string text = example("box_expansion.toml"),
                      walls = "[box]\nleft = \"0 um\"\nright = \"10 um\"\n";
    const std::size_t box = text.find(walls);
    REQUIRE(box != std::string::npos);
    const std::string header = std::string(text).replace(
        box, walls.size(), "[box.soft_walls]\nwidths = [\"0.1 um\"]\nheight = \"100 kB*nK\"\n");
    const std::string opened =
        scenario_text_with_values(header, "b.toml", {{"box.left", "0 um"}, {"box.right", "10 um"}});
    CHECK(opened.substr(header.size()) == "\n[box]\nleft = \"0 um\"\nright = \"10 um\"\n");
    CHECK(read_scenario_text(opened, "b.toml").spectrum.box->second ==
          read_scenario_text(text, "b.toml").spectrum.box->second);

    const std::string dotted = "box.left = \"0 um\"\n" + std::string(text).replace(box, walls.size(), "");
    const std::string added = scenario_text_with_values(dotted, "b.toml", {{"box.right", "10 um"}});
    CHECK(inserted_after(dotted, added, line_of(dotted, "title")) == "box.right = \"10 um\"");
    CHECK(read_scenario_text(added, "b.toml").spectrum.box->second ==
          read_scenario_text(text, "b.toml").spectrum.box->second);
  }
  SECTION("an inline table: its values replaced, no key added") {
    const std::string text =
        std::string(default_scenario_text()) + "[box]\nsoft_walls = {widths = [\"1 nm\"]}\n";
    const std::string edited =
        scenario_text_with_values(text, "i.toml", {{"box.soft_walls.widths", Json::array({"2 nm"})}});
    const std::string last = "\nsoft_walls = {widths = [\"2 nm\"]}\n";
    CHECK(edited.substr(edited.size() - last.size()) == last);
    const InputError e = edit_error(text, {{"box.soft_walls.height", "1 h*kHz"}});
    CHECK(e.key == "box.soft_walls.height");
    CHECK(std::string(e.what()).find("inline table") != std::string::npos);
  }
  SECTION("CRLF line ends and a missing last line break") {
    std::string crlf;
    for (const auto& line : lines_of(example("ion_translation.toml"))) crlf += line + "\r\n";
    const std::string edited =
        scenario_text_with_values(crlf, "c.toml", {{"trap.frequency", "2 MHz"}, {"initial.level", 0}});
    const Scenario s = read_scenario_text(edited, "c.toml");
    CHECK(s.potential.parameter("trap.frequency") ==
          Approx(2 * M_PI * 2e6 * s.units.time_s()).epsilon(1e-12));
    CHECK(s.work->request.initial.kind() == InitialState::Kind::eigenstate);
    CHECK(lines_of(edited).size() == lines_of(crlf).size());

    std::string text(default_scenario_text());
    text.pop_back();
    const std::string appended =
        scenario_text_with_values(text, "n.toml", {{"initial.level", 1}, {"work.steps", 200}});
    CHECK(appended.substr(text.size() - 16) == "level = 1\n\n[work]\nsteps = 200\n");
    CHECK(read_scenario_text(appended, "n.toml").work->request.steps == 200);
  }
}

namespace {

// A TOML value as JSON (scalars and arrays of scalars; what the examples hold).
Json json_of(const toml::node& n) {
  if (const auto* s = n.as_string()) return s->get();
  if (const auto* i = n.as_integer()) return i->get();
  if (const auto* f = n.as_floating_point()) return f->get();
  if (const auto* b = n.as_boolean()) return b->get();
  Json out = Json::array();
  for (const auto& e : *n.as_array()) out.push_back(json_of(e));
  return out;
}

// Every value of a table with its address, array tables numbered from 1.
void values_of(const toml::table& t, const std::string& prefix,
               std::vector<std::pair<std::string, const toml::node*>>& out) {
  for (const auto& [k, v] : t) {
    const std::string name = prefix + std::string(k.str());
    if (const auto* sub = v.as_table())
      values_of(*sub, name + ".", out);
    else if (v.is_array_of_tables())
      for (std::size_t i = 0; i < v.as_array()->size(); ++i)
        values_of(*v.as_array()->at(i).as_table(), name + "[" + std::to_string(i + 1) + "].", out);
    else
      out.emplace_back(name, &v);
  }
}

}  // namespace

TEST_CASE("issue 15: every value of every example set to itself by each of its addresses",
          "[scenario_edit]") {
  // Setting a value to what it is must give a text that parses to the same TOML document with the
  // same lines; strings, integers and bools are written back byte for byte.
  const std::string folder = std::string(TRAPWORK_SOURCE_DIR) + "/examples/";
  for (const auto& name :
       {"box_barrier.toml", "box_expansion.toml", "double_well.toml", "ion_quartic.toml",
        "ion_shuttle_model.toml", "ion_spectroscopy_start.toml", "ion_squeeze.toml", "ion_sweep.toml",
        "ion_translation.toml", "tabulated_trap.toml", "tweezer_deform.toml", "tweezer_gaussian.toml"}) {
    const std::string text = example(name);
    const toml::table root = toml::parse(text);
    std::vector<std::pair<std::string, const toml::node*>> values;
    values_of(root, "", values);
    // The same values through term names and change[N].
    const std::size_t count = values.size();
    for (std::size_t i = 0; i < count; ++i) {
      const std::string address = values[i].first;
      if (address.rfind("potential[", 0) == 0) {
        const std::size_t close = address.find("].");
        const toml::table& term =
            *root["potential"].as_array()->at(std::stoul(address.substr(10)) - 1).as_table();
        if (const auto* term_name = term.get_as<std::string>("name"))
          values.emplace_back(term_name->get() + address.substr(close + 1), values[i].second);
      }
      if (address.rfind("protocol.change[", 0) == 0) values.emplace_back(address.substr(9), values[i].second);
    }
    CHECK(values.size() > count);
    for (const auto& [address, node] : values) {
      INFO(name << ": " << address);
      const std::string edited = scenario_text_with_values(text, folder + name, {{address, json_of(*node)}});
      CHECK(lines_of(edited).size() == lines_of(text).size());
      CHECK(toml::parse(edited) == root);
      if (!node->is_floating_point()) CHECK(edited == text);
    }
    CHECK_NOTHROW(read_scenario_text(text, folder + name));
  }
}
