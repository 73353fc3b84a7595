#pragma once
// Output files and printed reports of the command-line tool.
//
// Every file is written under a temporary name "<name>.tmp-<pid>" in the same folder and
// renamed when complete, so a reader never sees a half-written file.
// CSV layout (loads with numpy.genfromtxt(f, delimiter=",", names=True) or
// pandas.read_csv(f, comment="#")): the first line holds the column names, units in the names
// (energy_h_kHz, mean_x_um); '#' comment lines follow it, then the rows. The names come first
// because genfromtxt(names=True) takes the first line as the names even when it starts with
// '#'. Numbers are written in the shortest form that reads back to the same double; "nan"
// marks a value that does not exist (the spacing above the last level).
#include <filesystem>
#include <functional>
#include <nlohmann/json.hpp>
#include <ostream>
#include <string>
#include <vector>

#include "solver/spectrum.hpp"
#include "solver/tool/scenario.hpp"

namespace trapwork {

// Writes `path` through `write`, atomically (see above). On any exception the temporary file
// is removed and the exception passes on; `path` is then untouched.
void write_file_atomically(const std::filesystem::path& path,
                           const std::function<void(std::ostream&)>& write);

// Shortest decimal text that reads back to the same double; "nan", "inf", "-inf" otherwise.
std::string number_text(double v);

struct CsvColumn {
  std::string name;
  std::vector<double> values;
};
struct CsvTable {
  std::vector<CsvColumn> columns;     // all of one length
  std::vector<std::string> comments;  // written as "# <text>" lines after the names
};
void write_csv(std::ostream& out, const CsvTable& table);

// A unit name as part of a column name: "h*kHz" -> "h_kHz".
std::string column_unit(const std::string& unit);

// Display units of one scenario: energies in its display unit, lengths in um.
struct Display {
  double energy_per;  // internal energy of one display unit
  double um;          // internal length of one micrometre
  std::string e;      // display energy unit
  std::string e_col;  // "_h_kHz"
  double energy(double internal) const { return conversion_rounded(internal / energy_per); }
  double length(double internal) const { return conversion_rounded(internal / um); }
};
Display display(const Scenario& s);

// Up to `digits` significant digits (printf %g); "-" for NaN.
std::string short_number(double v, int digits = 6);
// SI unit of a dimension, for summaries: "Hz", "m", "J/m^4".
std::string si_unit(const Dimension& d);
// "periodic (Fourier), 256 points on [-1, 1] um, spacing 7.8 nm" and its JSON form.
std::string grid_text(const Grid& g, const Display& d);
nlohmann::ordered_json grid_json(const Grid& g, const Display& d);
// The [[potential]] terms as given (text, SI and internal values) and the unit system.
nlohmann::ordered_json potential_json(const Scenario& scenario);
nlohmann::ordered_json units_json(const Scenario& scenario);
// What a bare number means in a scenario with [units] natural = true: "hbar = m = 1 (m = 40 u),
// length L0 = 15.9 nm, energy ... = h*1 MHz = hbar*omega_ref, time ..." (lab units).
std::string natural_units_text(const Scenario& scenario);
// One report line: "  label       text".
void print_row(std::ostream& out, const std::string& label, const std::string& text);
// "trapwork <command>: <title>", then scenario, particle, units, potential and box lines.
void print_scenario_header(std::ostream& out, const std::string& command, const Scenario& scenario);

// The tables and the summary of one spectrum run (energies in the scenario's display unit,
// lengths in um, wavefunctions in 1/sqrt(um)).
CsvTable spectrum_table(const Scenario& scenario, const SpectrumResult& result);
CsvTable states_table(const Scenario& scenario, const SpectrumResult& result);
nlohmann::ordered_json spectrum_summary(const Scenario& scenario, const SpectrumResult& result);

// Writes spectrum.csv, states.csv and summary.json into `folder` (created if missing) and
// returns their paths.
std::vector<std::filesystem::path> write_spectrum_outputs(const std::filesystem::path& folder,
                                                          const Scenario& scenario,
                                                          const SpectrumResult& result);

// The readable report printed by `trapwork spectrum`: header (title, particle, trap, grid,
// method, convergence), the table of levels, then the warnings.
void print_spectrum_report(std::ostream& out, const Scenario& scenario, const SpectrumResult& result);

}  // namespace trapwork
