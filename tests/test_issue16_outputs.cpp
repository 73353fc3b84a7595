// Issue 16, output hygiene: lines.csv leaves out lines below a stated probability floor (the
// tables and statistics keep them); the columns of each CSV do not change with the scenario (a
// column that does not apply is empty); plain column names; the level enlargement is a note,
// not a warning, and does not mark a sweep point.
#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "scratch_files.hpp"
#include "solver/scenario/tasks.hpp"

using namespace trapwork;
namespace fs = std::filesystem;

namespace {

std::string csv_text(const CsvTable& table) {
  std::ostringstream out;
  write_csv(out, table);
  return out.str();
}

std::string header_of(const CsvTable& table) {
  const std::string text = csv_text(table);
  return text.substr(0, text.find('\n'));
}

std::vector<std::string> column_names(const CsvTable& table) {
  std::vector<std::string> names;
  for (const auto& c : table.columns) names.push_back(c.name);
  return names;
}

const CsvTable& table_named(const std::vector<NamedTable>& tables, const std::string& file) {
  for (const auto& t : tables)
    if (t.file == file) return t.table;
  FAIL("no table " << file);
  throw;
}

// Rows of a written CSV text (lines that are neither the header nor comments).
std::vector<std::string> data_lines(const std::string& csv) {
  std::vector<std::string> rows;
  std::istringstream in(csv);
  std::string line;
  std::getline(in, line);
  while (std::getline(in, line))
    if (!line.empty() && line[0] != '#') rows.push_back(line);
  return rows;
}

bool contains(const std::string& text, const std::string& part) { return text.find(part) != std::string::npos; }

// A harmonic ion with a reference frequency: a harmonic reference exists, work in h*kHz and
// in hbar*omega_ref.
const std::string ion_text = trapwork_test::small_shuttle_text + R"(
[units]
reference_frequency = "1 MHz"
energy = "h*kHz"
)";

// An 87 u atom in a 4 um hard-walled box whose Gaussian bump grows: no reference frequency,
// no harmonic reference, the same energy unit as the ion.
const std::string box_text = R"(title = "box with a growing bump"
[particle]
mass = "87 u"
[units]
energy = "h*kHz"
[box]
left = "-2 um"
right = "2 um"
[[potential]]
name = "bump"
shape = "gaussian"
depth = "0 h*kHz"
waist = "0.6 um"
centre = "0.5 um"
[protocol]
duration = "2 ms"
[[protocol.change]]
parameter = "bump.depth"
to = "-0.2 h*kHz"
[initial]
temperature = "5 nK"
[work]
time_step_check = false
)";

WorkOutcome work_of(const std::string& text, const std::string& name) {
  return work_task(read_scenario_text(text, name), std::nullopt);
}

}  // namespace

TEST_CASE("issue 16: write_csv leaves out the rows marked for the file and writes empty cells for a column that does not apply",
          "[output][issue16]") {
  CsvTable t;
  t.columns = {{"work_h_kHz", {1, 2, 3}}, absent_column("work_hbar_omega", 3), {"probability", {0.5, 1e-20, 0.5}}};
  t.left_out_of_file = {false, true, false};
  t.comments = {"floor"};
  CHECK(csv_text(t) == "work_h_kHz,work_hbar_omega,probability\n# floor\n1,,0.5\n3,,0.5\n");
  CHECK(std::isnan(t.columns[1].values[0]));  // the table (and the Python arrays) keep the shape
  t.left_out_of_file.pop_back();
  std::ostringstream bad;
  CHECK_THROWS_AS(write_csv(bad, t), std::logic_error);
}

TEST_CASE("issue 16: lines.csv leaves out lines below the stated floor; the tables and statistics keep them",
          "[output][issue16]") {
  const WorkOutcome o = work_of(ion_text, "ion.toml");
  const WorkRun run = o.run();
  const WorkDistribution& d = run.result.distribution;
  const LinesFileFloor floor = lines_file_floor(d);
  CHECK(floor.floor == 1e-15);
  std::size_t below = 0;
  double below_probability = 0;
  for (const auto& l : d.lines)
    if (l.probability < 1e-15) {
      ++below;
      below_probability += l.probability;
    }
  REQUIRE(below > 0);  // a thermal shuttle has lines far below 1e-15 (rounding-level P(m -> n))
  CHECK(floor.left_out == below);
  CHECK(floor.left_out_probability == Approx(below_probability).margin(1e-300));

  const auto tables = task_tables(o);
  const CsvTable& lines = table_named(tables, "lines.csv");
  CHECK(lines.columns[0].values.size() == d.lines.size());  // the table: every line
  const std::string file = csv_text(lines);
  CHECK(data_lines(file).size() == d.lines.size() - below);  // the file: those at or above the floor
  for (const auto& row : trapwork_test::csv_rows(file)) CHECK(row[2] >= 1e-15);
  const std::string stated = "probability floor 1e-15: " + std::to_string(below) + " lines below it left out";
  CHECK(contains(file, stated));
  const auto summary = task_summary(o);
  CHECK(summary["work"]["lines_file"]["probability_floor"] == 1e-15);
  CHECK(summary["work"]["lines_file"]["left_out"] == below);
  CHECK(summary["work"]["lines"] == d.lines.size());
  // the statistics are those of every line, renormalised by the resolved weight as the library's
  // moments are (to the rounding of the sum, 1e-12 of sum p |W|: the lines carry both signs of W)
  double mean = 0, magnitude = 0, weight = 0;
  for (const auto& l : d.lines) {
    mean += l.probability * l.work;
    magnitude += l.probability * std::abs(l.work);
    weight += l.probability;
  }
  CHECK(weight == Approx(d.resolved_weight).epsilon(1e-12));
  CHECK(std::abs(mean / weight - d.mean) <= 1e-12 * magnitude / weight);
}

TEST_CASE("issue 16: each table has the same columns for a harmonic ion and a box", "[output][issue16]") {
  const WorkOutcome ion = work_of(ion_text, "ion.toml");
  const WorkOutcome box = work_of(box_text, "box.toml");
  REQUIRE(ion.run().result.harmonic);
  REQUIRE_FALSE(box.run().result.harmonic);
  REQUIRE(ion.scenario.omega_ref > 0);
  REQUIRE_FALSE(box.scenario.omega_ref > 0);
  const auto ion_tables = task_tables(ion), box_tables = task_tables(box);
  for (const std::string file : {"lines.csv", "histogram.csv", "density.csv", "transition.csv", "characteristic.csv"}) {
    INFO(file);
    CHECK(header_of(table_named(ion_tables, file)) == header_of(table_named(box_tables, file)));
  }
  // the columns that do not apply to the box are there and empty
  const CsvTable& density = table_named(box_tables, "density.csv");
  CHECK(column_names(density) ==
        std::vector<std::string>{"work_h_kHz", "density_per_h_kHz", "harmonic_density_per_h_kHz"});
  for (const auto& row : data_lines(csv_text(density))) CHECK(row.back() == ',');
  for (const auto& row : data_lines(csv_text(table_named(box_tables, "lines.csv"))))
    CHECK(contains(row, ",,"));  // work_hbar_omega
  CHECK(contains(csv_text(table_named(box_tables, "transition.csv")), "reference_probability: empty: no harmonic reference"));

  // spectrum.csv: the box has no curvature at its minimum, no harmonic shift
  const SpectrumOutcome ion_levels = spectrum_task(read_scenario_text(ion_text, "ion.toml"), 4);
  const SpectrumOutcome box_levels = spectrum_task(read_scenario_text(box_text, "box.toml"), 4);
  const CsvTable a = task_tables(ion_levels)[0].table;
  const CsvTable b = task_tables(box_levels)[0].table;
  CHECK(header_of(a) == header_of(b));
  REQUIRE(a.columns[6].name == "harmonic_shift_h_kHz");
  CHECK(a.columns[6].applies);
  CHECK_FALSE(b.columns[6].applies);  // written as empty cells
}

TEST_CASE("issue 16: plain column names for the characteristic function and the internal energy", "[output][issue16]") {
  const WorkOutcome o = work_of(ion_text, "ion.toml");
  const auto tables = task_tables(o);
  CHECK(column_names(table_named(tables, "characteristic.csv")) ==
        std::vector<std::string>{"conjugate_variable_per_h_kHz", "characteristic_function_real",
                                 "characteristic_function_imaginary"});
  const SpectrumOutcome s = spectrum_task(read_scenario_text(ion_text, "ion.toml"), 3);
  const auto names = column_names(task_tables(s)[0].table);
  CHECK(std::count(names.begin(), names.end(), "energy_hbar2_per_m_L0sq") == 1);
  CHECK(std::count(names.begin(), names.end(), "energy_internal") == 0);
}

TEST_CASE("issue 16: levels enlarged to bound the escape probability is a note, not a warning", "[output][issue16]") {
  // A 40 u ion in a 1 MHz trap moved by 40 nm in 0.3 us (|alpha|^2 about 3): with a final
  // margin of 2 levels the unresolved weight is far above its tolerance, so the run is repeated
  // with more levels (as test_cost.cpp's stage test).
  const std::string text = R"(title = "enlarged"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "0.3 us"
[[protocol.change]]
parameter = "trap.centre"
to = "40 nm"
[initial]
mean_phonons = 0.2
[work]
final_margin = 2
time_step_check = false
)";
  const WorkOutcome o = work_of(text, "enlarged.toml");
  const WorkRun run = o.run();
  const auto summary = task_summary(o);
  REQUIRE(summary["notes"].size() == 1);
  CHECK(contains(summary["notes"][0].get<std::string>(), "levels enlarged"));
  for (const auto& w : summary["warnings"]) CHECK_FALSE(contains(w.get<std::string>(), "levels enlarged"));
  std::ostringstream report;
  print_task_report(report, o);
  CHECK(contains(report.str(), "\nnotes\n  - levels enlarged"));
  // the enlarged run meets its tolerances: nothing else to warn about, so the sweep point is not warned
  CHECK(work_warnings(run).empty());
  SweepSpec one;
  one.axes.push_back({});
  one.axes[0].values = {1.0};
  CHECK(sweep_row(run, one, 0).warnings == 0);
}
