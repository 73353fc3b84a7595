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
#include <string_view>
#include <vector>

#include "solver/spectrum.hpp"
#include "solver/scenario/scenario.hpp"

namespace trapwork {

// Writes `path` through `write`, atomically (see above). On any exception the temporary file
// is removed and the exception passes on; `path` is then untouched.
void write_file_atomically(const std::filesystem::path& path,
                           const std::function<void(std::ostream&)>& write);

// One run's hold on its output folder, taken by every command before it computes:
//  1. refuses an output that would replace an input of the run (the scenario, data files,
//     table files): inputs and outputs are compared by filesystem identity
//     (std::filesystem::equivalent), so "out/../out/data.csv" and hard links are caught;
//  2. creates the folder and opens its lock file ".trapwork-lock": a folder that cannot be
//     written is refused here, with the OS reason, not after the computation;
//  3. locks the folder for the run with an advisory lock (flock; the kernel drops it when the
//     process ends, so a crashed run's lock file never blocks). The file holds pid, host,
//     command and start time; a second run on the folder says who holds it and stops;
//  4. the run writes its files into staging(), a hidden folder ".trapwork-new-<pid>" inside the
//     output folder, and commit() renames them into place with SIGINT and SIGTERM held back, so
//     the folder holds one whole run: the files of the previous run that this run does not write
//     again are removed then (the list is kept in ".trapwork-outputs"); files that are not
//     trapwork's outputs, and inputs of the run, are never touched. A SIGINT or SIGTERM during
//     the write phase only sets a flag (the handler does nothing else); commit() then discards
//     the staged files and ends the process by that signal, leaving the previous run in place.
//     (A SIGKILL or power loss inside the rename loop itself can still mix two runs.)
// The destructor of a run that did not commit removes its staged files, and the folder too
// when the run created it and it holds nothing else (a failed run leaves no empty folder).
class OutputRun {
 public:
  struct Input {
    std::filesystem::path path;
    std::string what;  // "the scenario", "the data file", "a table file of the scenario"
  };
  // `names`: every file name the command may write into the folder; `command`: for the lock
  // file ("trapwork work model.toml"). Throws InputError naming the folder or the input.
  OutputRun(std::filesystem::path folder, std::vector<std::string> names, const std::vector<Input>& inputs,
            std::string command);
  ~OutputRun();
  OutputRun(const OutputRun&) = delete;
  OutputRun& operator=(const OutputRun&) = delete;

  const std::filesystem::path& folder() const { return folder_; }
  // The staging folder (created, and the signal flag handler installed, on the first call).
  const std::filesystem::path& staging();
  // Moves the staged files into the folder (see above); returns the final paths of `files`,
  // which are staged files or files the run wrote in the folder itself (sweep's resume record).
  std::vector<std::filesystem::path> commit(const std::vector<std::filesystem::path>& files);

 private:
  std::filesystem::path folder_, staging_;
  std::vector<std::string> names_;
  std::vector<std::filesystem::path> inputs_;
  int lock_fd_ = -1;
  bool created_ = false, committed_ = false, handling_ = false;
  void restore_signals();
};

// The inputs of a scenario run: the scenario file and the table files it names (potential and
// ramp tables). The built-in scenario has none.
std::vector<OutputRun::Input> scenario_inputs(const Scenario& scenario);

// trapwork's version ("0.1.0", the CMake project version).
std::string_view trapwork_version();
// What every summary.json carries about how it was made: {"trapwork_version", "invocation",
// "changed_values"} (scenario.hpp).
nlohmann::ordered_json provenance_json(const Scenario& scenario);
// `summary` with provenance_json(scenario) added at its end.
nlohmann::ordered_json with_provenance(nlohmann::ordered_json summary, const Scenario& scenario);

// Shortest decimal text that reads back to the same double; "nan", "inf", "-inf" otherwise.
std::string number_text(double v);

// A table's columns do not change with the scenario: a column that does not apply to a run
// (no harmonic reference, no reference frequency) is still there, its cells empty in the file
// (NaN in `values`, so the Python module's arrays keep their shape); "nan" in a cell means a
// value that applies but does not exist (a failed sweep point, a spacing after the last level).
struct CsvColumn {
  std::string name;
  std::vector<double> values;
  bool applies = true;  // false: written as empty cells
};
struct CsvTable {
  std::vector<CsvColumn> columns;     // all of one length
  std::vector<std::string> comments;  // written as "# <text>" lines after the names
  // Rows the file leaves out (empty: none; else one flag per row): the table itself, which the
  // Python module and every computation see, keeps them (lines.csv's probability floor).
  std::vector<bool> left_out_of_file;
};
// Names on the first line, the comments, then the rows (those not left_out_of_file).
void write_csv(std::ostream& out, const CsvTable& table);
// A column of `rows` NaN values that does not apply (written as empty cells).
CsvColumn absent_column(std::string name, std::size_t rows);

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
// spectrum.csv's column of the energies in the internal unit hbar^2/(m L0^2) ("energy_internal"
// before issue 16): the unit of bare numbers with [units] natural = true.
extern const std::string internal_energy_column;
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
