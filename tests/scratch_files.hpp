#pragma once
// Helpers shared by the tests that write files: a fresh scratch folder, whole-file reads and
// the numbers of a CSV file.
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <stdexcept>
#include <string>
#include <vector>

namespace trapwork_test {

// A small, fast work scenario shared by the tests of threads and tasks: a 40 u ion in a 1 MHz
// trap with a small quartic term, thermal with 0.5 phonons, moved by 30 nm in 1.5 us
// (anharmonic, so the lines are not merged into a few harmonic ones), no time-step check.
inline const std::string small_shuttle_text = R"(title = "small shuttle"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "polynomial"
frequency = "1 MHz"
quartic = "0.01 h*Hz/nm^4"
[protocol]
duration = "1.5 us"
[[protocol.change]]
parameter = "trap.centre"
to = "30 nm"
[initial]
mean_phonons = 0.5
[work]
time_step_check = false
)";

// A purely harmonic 40 u ion at 1 MHz moved by 30 nm at constant speed in 1.5 us, nearly in its
// ground state: few levels, a run of a few seconds (the command-line, sweep and resume tests).
inline const std::string harmonic_move_text = R"(title = "harmonic move"
[particle]
mass = "40 u"
[[potential]]
name = "trap"
shape = "harmonic"
frequency = "1 MHz"
[protocol]
duration = "1.5 us"
[[protocol.change]]
parameter = "trap.centre"
to = "30 nm"
[initial]
mean_phonons = 0.3
)";

// An empty folder TRAPWORK_BINARY_DIR/<area>/<name>, removed and re-created each call.
inline std::filesystem::path scratch_dir(const std::string& area, const std::string& name) {
  const auto dir = std::filesystem::path(TRAPWORK_BINARY_DIR) / area / name;
  std::filesystem::remove_all(dir);
  std::filesystem::create_directories(dir);
  return dir;
}

inline std::string read_all(const std::filesystem::path& p) {
  std::ifstream in(p);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

// The numbers of a CSV text written by trapwork: the names line and '#' lines skipped.
inline std::vector<std::vector<double>> csv_rows(const std::string& csv) {
  std::vector<std::vector<double>> rows;
  std::istringstream in(csv);
  std::string line;
  std::getline(in, line);
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    std::vector<double> row;
    std::istringstream fields(line);
    for (std::string f; std::getline(fields, f, ',');) row.push_back(std::strtod(f.c_str(), nullptr));
    rows.push_back(row);
  }
  return rows;
}

// The position of the column `name` in the names line of a CSV text written by trapwork.
inline std::size_t csv_column_index(const std::string& csv, const std::string& name) {
  std::istringstream names(csv.substr(0, csv.find('\n')));
  std::size_t k = 0;
  for (std::string f; std::getline(names, f, ','); ++k)
    if (f == name) return k;
  throw std::runtime_error("no column " + name);
}

}  // namespace trapwork_test
