// The `trapwork` command: runs every example, checks its files and its exit codes.
#include "solver/scenario/output.hpp"

#include <sys/wait.h>

#include <catch2/catch.hpp>

#include "scratch_files.hpp"
#include <cctype>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <set>
#include <sstream>

using Catch::Contains;
namespace fs = std::filesystem;

namespace {
const fs::path binary = fs::path(TRAPWORK_BINARY_DIR) / "trapwork";
const fs::path examples = fs::path(TRAPWORK_SOURCE_DIR) / "examples";

fs::path scratch_dir(const std::string& name) { return trapwork_test::scratch_dir("test-cli", name); }

using trapwork_test::read_all;

struct Run {
  int exit_code;
  std::string out, err;
};

// Runs trapwork with `arguments` (shell words) from `dir`, capturing stdout and stderr.
Run run(const std::string& arguments, const fs::path& dir) {
  const std::string command =
      "cd '" + dir.string() + "' && '" + binary.string() + "' " + arguments + " > stdout.txt 2> stderr.txt";
  const int status = std::system(command.c_str());
  REQUIRE(WIFEXITED(status));
  return {WEXITSTATUS(status), read_all(dir / "stdout.txt"), read_all(dir / "stderr.txt")};
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> lines;
  std::istringstream in(text);
  for (std::string line; std::getline(in, line);) lines.push_back(line);
  return lines;
}

std::string replace_first(std::string text, const std::string& from, const std::string& to) {
  const auto at = text.find(from);
  REQUIRE(at != std::string::npos);
  return text.replace(at, from.size(), to);
}

std::size_t fields(const std::string& line) {
  return 1 + std::count(line.begin(), line.end(), ',');
}

// A CSV written by trapwork: names on line 1, then '#' comments, then rows of as many fields.
// Returns the number of rows.
std::size_t check_csv(const fs::path& file, const std::string& first_column) {
  INFO(file.string());
  const auto lines = lines_of(read_all(file));
  REQUIRE(lines.size() > 1);
  CHECK(lines[0].rfind(first_column + ",", 0) == 0);
  std::size_t i = 1;
  while (i < lines.size() && lines[i].rfind("# ", 0) == 0) ++i;
  CHECK(i > 1);  // the units are stated in comment lines
  for (std::size_t j = i; j < lines.size(); ++j) {
    CHECK(fields(lines[j]) == fields(lines[0]));
    CHECK(lines[j].find('#') == std::string::npos);
  }
  return lines.size() - i;
}

// Checks the three files of a spectrum run and returns the summary.
nlohmann::json check_outputs(const fs::path& folder) {
  for (const auto& entry : fs::directory_iterator(folder))
    CHECK(entry.path().filename().string().find(".tmp-") == std::string::npos);
  REQUIRE(fs::exists(folder / "summary.json"));
  const auto summary = nlohmann::json::parse(read_all(folder / "summary.json"));
  const std::size_t levels = summary.at("levels").size();
  CHECK(levels == summary.at("levels_requested").get<std::size_t>());
  CHECK(check_csv(folder / "spectrum.csv", "level") == levels);
  const std::size_t points = summary.at("grid").at("points").get<std::size_t>();
  CHECK(check_csv(folder / "states.csv", "x_um") == points);
  CHECK(fields(lines_of(read_all(folder / "states.csv"))[0]) == 1 + levels);
  return summary;
}
}  // namespace

TEST_CASE("trapwork spectrum runs every example and writes complete files", "[cli][examples]") {
  int count = 0;
  for (const auto& entry : fs::directory_iterator(examples)) {
    if (entry.path().extension() != ".toml") continue;
    const std::string name = entry.path().stem().string();
    INFO(name);
    const fs::path dir = scratch_dir(name);
    const Run r = run("spectrum '" + entry.path().string() + "' -o out --quiet", dir);
    CHECK(r.exit_code == 0);
    CHECK(r.err.empty());
    CHECK(r.out.empty());  // --quiet
    const auto summary = check_outputs(dir / "out");
    CHECK(summary.at("scenario").at("file") == entry.path().string());
    ++count;
  }
  CHECK(count >= 5);
}

TEST_CASE("the built-in scenario, the report and the overrides", "[cli]") {
  const fs::path dir = scratch_dir("default");
  const Run r = run("spectrum --levels 6", dir);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("trapwork spectrum: default") && Contains("spacing") && Contains("h*kHz") &&
                        Contains("wrote default-output"));
  const auto summary = check_outputs(dir / "default-output");  // the default folder
  CHECK(summary.at("levels").size() == 6);
  CHECK(summary.at("units").at("energy") == "h*kHz");
  CHECK(run("spectrum default -o elsewhere --quiet", dir).exit_code == 0);
  CHECK(fs::exists(dir / "elsewhere" / "summary.json"));
}

TEST_CASE("a bad scenario exits with 2 and names file, line and key", "[cli]") {
  const fs::path dir = scratch_dir("bad");
  {
    std::ofstream toml(dir / "bad.toml");
    toml << "[particle]\nmass = \"40 u\"\n[[potential]]\nshape = \"harmonic\"\nfrequncy = \"1 MHz\"\n";
  }
  const Run r = run("spectrum bad.toml -o out", dir);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Contains("trapwork: error: bad.toml:5:1: potential[1].frequncy") &&
                        Contains("did you mean 'frequency'?"));
  CHECK_FALSE(fs::exists(dir / "out"));  // nothing written

  const Run missing = run("spectrum no_such_file.toml", dir);
  CHECK(missing.exit_code == 2);
  CHECK_THAT(missing.err, Contains("trapwork: error: no_such_file.toml") && Contains("cannot open"));

  // Valid input that the physics cannot use (more levels than grid points): PhysicsError.
  {
    std::ofstream toml(dir / "small.toml");
    toml << "[particle]\nmass = \"40 u\"\n[[potential]]\nshape = \"harmonic\"\nfrequency = \"1 MHz\"\n"
            "[spectrum]\nlevels = 20\n[grid]\npoints = 8\nleft = \"-0.1 um\"\nright = \"0.1 um\"\n";
  }
  const Run physics = run("spectrum small.toml -o small-out", dir);
  CHECK(physics.exit_code == 2);
  CHECK_THAT(physics.err, Contains("trapwork: error:"));
  CHECK_FALSE(fs::exists(dir / "small-out" / "spectrum.csv"));

  CHECK(run("spectrum --levels 0", dir).exit_code == 2);  // command-line value out of range
  CHECK(run("spectrum --no-such-option", dir).exit_code == 2);
  CHECK(run("", dir).exit_code == 2);  // no command
}

TEST_CASE("--help on the tool and on each command", "[cli]") {
  const fs::path dir = scratch_dir("help");
  const Run top = run("--help", dir);
  CHECK(top.exit_code == 0);
  CHECK_THAT(top.out, Contains("spectrum"));
  const Run spectrum = run("spectrum --help", dir);
  CHECK(spectrum.exit_code == 0);
  CHECK_THAT(spectrum.out, Contains("--levels") && Contains("--output") && Contains("--quiet"));
}

// ---- trapwork work, sweep, demo ------------------------------------------------------------

namespace {
const std::string& harmonic_move = trapwork_test::harmonic_move_text;

void write_text(const fs::path& file, const std::string& text) {
  std::ofstream out(file);
  out << text;
}

// The files of a work run, each complete; returns the summary.
nlohmann::json check_work_outputs(const fs::path& folder, bool reverse) {
  for (const auto& entry : fs::directory_iterator(folder))
    CHECK(entry.path().filename().string().find(".tmp-") == std::string::npos);
  REQUIRE(fs::exists(folder / "summary.json"));
  const auto summary = nlohmann::json::parse(read_all(folder / "summary.json"));
  const std::string e = "_" + trapwork::column_unit(summary.at("units").at("energy"));
  // lines.csv leaves out the lines below its probability floor (issue 16), the summary counts them
  CHECK(check_csv(folder / "lines.csv", "work" + e) == summary.at("work").at("lines").get<std::size_t>() -
                                                          summary.at("work").at("lines_file").at("left_out").get<std::size_t>());
  CHECK(check_csv(folder / "histogram.csv", "bin_start" + e) > 0);
  CHECK(check_csv(folder / "density.csv", "work" + e) > 0);
  const auto& levels = summary.at("levels");
  CHECK(check_csv(folder / "transition.csv", "initial") ==
        levels.at("initial_kept").get<std::size_t>() * levels.at("final").get<std::size_t>());
  CHECK(check_csv(folder / "characteristic.csv", "conjugate_variable_per" + e) == 401);
  CHECK(fs::exists(folder / "reverse_lines.csv") == reverse);
  if (reverse) CHECK(check_csv(folder / "reverse_lines.csv", "work" + e) > 0);
  for (const char* picture : {"potential.png", "potential.svg", "work.png", "work.svg"})
    CHECK(fs::file_size(folder / picture) > 1000);
  for (const char* key : {"command", "scenario", "units", "potential", "protocol", "initial", "grid", "method",
                          "steps", "time_step_ns", "levels", "work", "jarzynski", "crooks", "harmonic",
                          "diagnostics", "warnings", "notes"})
    CHECK(summary.contains(key));
  for (const auto& check : summary.at("diagnostics").at("checks")) {
    CHECK(check.contains("tolerance"));
    CHECK(check.contains("pass"));
  }
  return summary;
}
}  // namespace

TEST_CASE("trapwork work writes every file, and a harmonic trap meets its analytic <W>", "[cli][work]") {
  const fs::path dir = scratch_dir("work");
  write_text(dir / "move.toml", harmonic_move);
  const Run r = run("work move.toml -o out", dir);
  REQUIRE(r.exit_code == 0);
  CHECK(r.err.empty());  // no progress bar when stderr is not a terminal
  CHECK_THAT(r.out, Contains("trapwork work: harmonic move") && Contains("<W>") && Contains("Jarzynski") &&
                        Contains("displaced oscillator") && Contains("PASS") && Contains("strongest work lines") &&
                        Contains("wrote out/summary.json"));
  const auto summary = check_work_outputs(dir / "out", true);
  const auto& harmonic = summary.at("harmonic");
  REQUIRE(harmonic.is_object());
  CHECK(harmonic.at("exact") == true);
  // The run's own error estimates are far below 1e-8 (line changes at half the step,
  // probability beyond the final levels); the mean work, a sum of a few dozen lines of order
  // hbar omega, is then good to well within 1e-6 of the analytic value (Husimi 1953, from
  // memory: <W> = 2 m v^2 sin^2(omega tau/2) at any temperature).
  const auto& diagnostics = summary.at("diagnostics");
  CHECK(diagnostics.at("time_step_error").get<double>() < 1e-8);
  CHECK(diagnostics.at("unresolved_weight").get<double>() < 1e-8);
  const double numeric = summary.at("work").at("mean").at("internal");
  const double analytic = harmonic.at("mean_work").at("internal");
  CHECK(std::abs(numeric - analytic) <= 1e-6 * std::abs(analytic));
  // ... and that analytic value is the closed form, evaluated here from the scenario's numbers.
  const double omega = 1, tau = 2 * 3.14159265358979323846 * 1.5;  // trap units: T0 = 1/omega
  const double distance = 30e-9 / summary.at("units").at("internal").at("length_m").get<double>();
  const double v = distance / tau;
  CHECK(std::abs(analytic - 2 * v * v * std::pow(std::sin(omega * tau / 2), 2)) <= 1e-9 * analytic);

  CHECK(run("work move.toml -o quiet --quiet", dir).out.empty());
}

// Issue 14: the report's numbers are the files' numbers and the user's units.
TEST_CASE("issue 14: strongest work lines print W as lines.csv holds it; the duration in the unit written",
          "[cli][work]") {
  const fs::path dir = scratch_dir("work-true-numbers");
  write_text(dir / "move.toml", replace_first(harmonic_move, "\"1.5 us\"", "\"0.0015 ms\""));
  const Run r = run("work move.toml -o out", dir);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("duration 0.0015 ms"));
  const auto summary = nlohmann::json::parse(read_all(dir / "out" / "summary.json"));
  CHECK(summary.at("protocol").at("duration") == "0.0015 ms");
  // every W printed among the strongest lines is, as text, a value of lines.csv's first column
  const auto csv = lines_of(read_all(dir / "out" / "lines.csv"));
  std::set<std::string> csv_work;
  for (const auto& line : csv)
    if (!line.empty() && line[0] != '#') csv_work.insert(line.substr(0, line.find(',')));
  const auto report = lines_of(r.out);
  const auto header = std::find_if(report.begin(), report.end(),
                                   [](const std::string& l) { return l.rfind("strongest work lines", 0) == 0; });
  REQUIRE(header != report.end());
  int printed = 0;
  for (auto it = header + 2; it != report.end() && !it->empty() && it->rfind("wrote", 0) != 0; ++it) {
    std::istringstream fields(*it);
    std::string w;
    fields >> w;
    INFO(*it);
    CHECK(csv_work.count(w) == 1);
    ++printed;
  }
  CHECK(printed >= 3);
}

TEST_CASE("trapwork sweep writes one row per point", "[cli][work]") {
  const fs::path dir = scratch_dir("sweep");
  write_text(dir / "sweep.toml", harmonic_move + "[work]\ntime_step_check = false\n[sweep]\n"
                                                 "parameter = \"protocol.duration\"\nvalues = [\"1.5 us\", \"0.7 us\", \"1 us\"]\n");
  const Run r = run("sweep sweep.toml -o out --jobs 2", dir);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("trapwork sweep") && Contains("protocol.duration, 3 points, 2 at a time"));
  REQUIRE(check_csv(dir / "out" / "sweep.csv", "protocol_duration_us") == 3);
  const auto lines = lines_of(read_all(dir / "out" / "sweep.csv"));
  std::vector<double> values;
  for (const auto& line : lines)
    if (!line.empty() && line[0] != '#' && std::isdigit(static_cast<unsigned char>(line[0])))
      values.push_back(std::stod(line));
  // sorted by value; the values are internal / (internal per us): a few roundings (common practice)
  REQUIRE(values.size() == 3);
  CHECK(values[0] == Approx(0.7).epsilon(1e-14));
  CHECK(values[1] == Approx(1.0).epsilon(1e-14));
  CHECK(values[2] == Approx(1.5).epsilon(1e-14));
  // issue 14: written as the user wrote them, not 1.5000000000000002 (values converted to
  // internal units and back are rounded to 15 digits, below the conversion's own rounding)
  std::vector<std::string> texts;
  for (const auto& line : lines)
    if (!line.empty() && std::isdigit(static_cast<unsigned char>(line[0]))) texts.push_back(line.substr(0, line.find(',')));
  CHECK(texts == std::vector<std::string>{"0.7", "1", "1.5"});
  CHECK(fs::file_size(dir / "out" / "sweep.png") > 1000);
}

TEST_CASE("each example runs through work or sweep", "[cli][work][examples][heavy]") {
  int count = 0;
  for (const auto& entry : fs::directory_iterator(examples)) {
    if (entry.path().extension() != ".toml") continue;
    const std::string text = read_all(entry.path());
    if (text.find("[protocol]") == std::string::npos) continue;  // spectrum-only examples
    const std::string name = entry.path().stem().string();
    INFO(name);
    const fs::path dir = scratch_dir("work-" + name);
    const bool sweep = text.find("[sweep") != std::string::npos;  // [sweep] or [[sweep.axis]]
    const Run r = run(std::string(sweep ? "sweep '" : "work '") + entry.path().string() + "' -o out --quiet", dir);
    CHECK(r.exit_code == 0);
    CHECK(r.err.empty());
    if (sweep)
      CHECK(check_csv(dir / "out" / "sweep.csv", text.find("[[sweep.axis]]") != std::string::npos ? "point"
                                                 : text.find("\"1 ms\"") != std::string::npos ? "protocol_duration_ms"
                                                                                               : "protocol_duration_us") > 1);
    else
      check_work_outputs(dir / "out", text.find("temperature") != std::string::npos);
    ++count;
  }
  CHECK(count >= 4);
}

TEST_CASE("demo and work --help, and a bad work scenario", "[cli][work]") {
  const fs::path dir = scratch_dir("work-help");
  const Run demo = run("demo --help", dir);
  CHECK(demo.exit_code == 0);
  CHECK_THAT(demo.out, Contains("--output") && Contains("--quiet") && Contains("built-in"));
  const Run sweep = run("sweep --help", dir);
  CHECK(sweep.exit_code == 0);
  CHECK_THAT(sweep.out, Contains("--jobs"));

  write_text(dir / "bad.toml", replace_first(harmonic_move, "to = \"30 nm\"", "to = \"30 MHz\""));
  const Run bad = run("work bad.toml -o out", dir);
  CHECK(bad.exit_code == 2);
  CHECK_THAT(bad.err, Contains("trapwork: error: bad.toml:12:6: protocol.change[1].to") && Contains("a length"));
  CHECK_FALSE(fs::exists(dir / "out"));

  // No [protocol]: work refuses, naming the file.
  write_text(dir / "still.toml", harmonic_move.substr(0, harmonic_move.find("[protocol]")));
  const Run still = run("work still.toml -o out", dir);
  CHECK(still.exit_code == 2);
  CHECK_THAT(still.err, Contains("still.toml") && Contains("[protocol]"));
}

TEST_CASE("issue 14: an output folder that cannot be written is refused before computing", "[cli]") {
  const fs::path dir = scratch_dir("unwritable-output");
  // A scenario whose computation fails (more levels than grid points): the folder error must
  // come first, so it is found before anything is computed.
  std::ofstream(dir / "small.toml") << "[particle]\nmass = \"40 u\"\n[[potential]]\nshape = \"harmonic\"\n"
                                       "frequency = \"1 MHz\"\n[spectrum]\nlevels = 20\n[grid]\npoints = 8\n"
                                       "left = \"-0.1 um\"\nright = \"0.1 um\"\n";
  std::ofstream(dir / "plain-file") << "x";
  const Run r = run("spectrum small.toml -o plain-file/out", dir);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Contains("trapwork: error: plain-file/out: cannot create the output folder: Not a directory"));
  CHECK_THAT(r.err, !Contains("levels"));
  // the scenario given as the output folder
  const Run same = run("spectrum small.toml -o small.toml", dir);
  CHECK(same.exit_code == 2);
  CHECK_THAT(same.err, Contains("an output folder, not the scenario"));
}

TEST_CASE("issue 14: a table file of the scenario is never overwritten by its outputs", "[cli]") {
  const fs::path dir = scratch_dir("table-input");
  fs::create_directories(dir / "out");
  std::ofstream(dir / "out" / "summary.json") << "-2, 40\n-1, 10\n0, 0\n1, 10\n2, 40\n";
  std::ofstream(dir / "tab.toml") << "[particle]\nmass = \"87 u\"\n[[potential]]\nname = \"data\"\n"
                                     "shape = \"table\"\nfile = \"out/summary.json\"\nx_unit = \"um\"\n"
                                     "energy_unit = \"kB*uK\"\n[spectrum]\nlevels = 3\n";
  const Run r = run("spectrum tab.toml -o out", dir);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Contains("summary.json here is a table file of the scenario"));
  CHECK(read_all(dir / "out" / "summary.json") == "-2, 40\n-1, 10\n0, 0\n1, 10\n2, 40\n");
}

TEST_CASE("issue 14: two runs on one output folder: the second says who holds it", "[cli]") {
  const fs::path dir = scratch_dir("locked-output");
  // The first run: a work run of the built-in scenario (a few seconds), in the background.
  const std::string first = "cd '" + dir.string() + "' && '" + binary.string() +
                            "' work default -o out --quiet > first.txt 2>&1 & echo $! > '" + (dir / "first.pid").string() + "'";
  REQUIRE(std::system(first.c_str()) == 0);
  // Wait until it holds the lock (its lock file names it), then start the second.
  for (int i = 0; i < 200 && !Catch::contains(read_all(dir / "out" / ".trapwork-lock"), "command trapwork work"); ++i)
    std::system("sleep 0.05");
  const Run second = run("work default -o out --quiet", dir);
  std::system(("while kill -0 $(cat '" + (dir / "first.pid").string() + "') 2>/dev/null; do sleep 0.1; done").c_str());
  CHECK(second.exit_code == 2);
  CHECK_THAT(second.err, Contains("the output folder is in use by another trapwork run (pid ") &&
                             Contains("command trapwork work default") && Contains("started "));
  CHECK(read_all(dir / "first.txt").empty());  // the first run finished without a word
  CHECK(fs::exists(dir / "out" / "summary.json"));
}

// --set ADDRESS=VALUE changes the scenario as an edited file would, and the summary records it.
TEST_CASE("--set changes a value as editing the file does, and the summary says so", "[cli][set]") {
  const fs::path dir = scratch_dir("set");
  const std::string file = (examples / "ion_translation.toml").string();
  std::string text = read_all(file);
  // the same change made by hand in a copy of the file
  const auto at = text.find("duration");
  REQUIRE(at != std::string::npos);
  const auto open = text.find('"', at), close = text.find('"', open + 1);
  text.replace(open, close - open + 1, "\"1.5 us\"");
  { std::ofstream(dir / "edited.toml") << text; }
  const Run by_set = run("work '" + file + "' --set 'protocol.duration=1.5 us' -o by-set --quiet", dir);
  REQUIRE(by_set.exit_code == 0);
  const Run by_hand = run("work edited.toml -o by-hand --quiet", dir);
  REQUIRE(by_hand.exit_code == 0);
  const auto set_summary = nlohmann::json::parse(read_all(dir / "by-set" / "summary.json"));
  const auto hand_summary = nlohmann::json::parse(read_all(dir / "by-hand" / "summary.json"));
  // Two runs of one scenario agree to rounding only (the FFT plans and threads may differ between
  // runs): the statistics to 1e-9 relative, the number of lines exactly.
  for (const char* key : {"mean", "sd", "dissipated_work"}) {
    const double a = set_summary["work"][key]["internal"], b = hand_summary["work"][key]["internal"];
    CHECK(std::abs(a - b) <= 1e-9 * std::abs(b));
  }
  CHECK(set_summary["work"]["lines"] == hand_summary["work"]["lines"]);
  CHECK(set_summary["protocol"] == hand_summary["protocol"]);
  CHECK(set_summary["changed_values"] == nlohmann::json::array({"protocol.duration=1.5 us"}));
  CHECK_THAT(set_summary["invocation"].get<std::string>(), Contains("--set 'protocol.duration=1.5 us'"));
  CHECK(hand_summary["changed_values"].empty());
  CHECK(set_summary["trapwork_version"] == std::string(trapwork::trapwork_version()));

  SECTION("the report names the change") {
    const Run r = run("spectrum default --set spectrum.levels=3 -o levels", dir);
    REQUIRE(r.exit_code == 0);
    CHECK_THAT(r.out, Contains("changed     spectrum.levels=3"));
    CHECK(lines_of(read_all(dir / "levels" / "spectrum.csv")).size() >= 4);
  }
  SECTION("a misspelt address is refused with the closest one") {
    const Run r = run("work default --set 'protocl.duration=1 us' -o bad", dir);
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Contains("did you mean 'protocol.duration'"));
    CHECK(!fs::exists(dir / "bad"));
  }
  SECTION("a wrong value is refused by the scenario reader with its line") {
    const Run r = run("work default --set 'protocol.duration=-1 us' -o bad", dir);
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Contains("protocol.duration = \"-1 us\": a duration >= 0"));
  }
  SECTION("an assignment without '=' is refused") {
    const Run r = run("spectrum default --set spectrum.levels -o bad", dir);
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Contains("ADDRESS=VALUE"));
  }
  SECTION("a sweep names the command that reruns each point with warnings") {
    const std::string sweep = (examples / "ion_sweep.toml").string();
    const Run r = run("sweep '" + sweep + "' -o sweep --set 'sweep.values=[\"0.2 us\"]' --set work.steps=20", dir);
    REQUIRE(r.exit_code == 0);
    const std::string rerun = "trapwork work " + sweep + " --set 'work.steps=20' --set 'protocol.duration=\"0.2 us\"'";
    REQUIRE_THAT(r.out, Contains(rerun));
    // and that command gives the point's numbers (its report has the warnings)
    const Run point = run(rerun.substr(std::string("trapwork ").size()) + " -o point", dir);
    REQUIRE(point.exit_code == 0);
    CHECK_THAT(point.out, Contains("WARN"));
  }
  SECTION("--version") {
    const Run r = run("--version", dir);
    CHECK(r.exit_code == 0);
    CHECK(r.out == "trapwork " + std::string(trapwork::trapwork_version()) + "\n");
  }
}
