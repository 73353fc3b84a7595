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
