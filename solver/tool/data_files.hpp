#pragma once
// Measured data files read by `trapwork compare` and `trapwork fit`.
//
// Layout (our own, shared by all four kinds): plain text, one row per line, fields separated by
// commas (when the header line has one) or else by spaces/tabs. Blank lines are skipped; '#'
// starts a comment (a whole line, or the rest of a row). The first other line is the header:
// column names, in any order. Quantities carry their unit in the column name, written as the
// unit with '*' replaced by '_' (so trapwork's own CSV columns read back):
//   work_h_kHz        work in h*kHz         frequency_kHz      a frequency in kHz
//   lower_h_kHz       a bin edge            force_h_kHz/um     a force in h*kHz/um
// or the name alone ("work") together with a comment line "# unit: h*kHz", which gives the unit
// of the file's main quantity (work and bin edges; frequencies and uncertainties).
// A comment line "# resolution: 0.4 h*kHz" states the measurement resolution sigma of the work
// values (Gaussian standard deviation, see solver/compare.hpp). Other "# word: text" comments
// are plain comments.
//
// Kinds and columns (an optional column `keep` of 1 or 0 marks runs the experiment rejected:
// rows with keep = 0 are skipped, and the number skipped is reported, never hidden):
//   work samples     work_<energy unit>                            one work value per run
//   level pairs      initial, final                                level indices (>= 0) per run
//   histogram        lower_<energy unit>, upper_<energy unit>, count
//                    contiguous ascending bins [lower, upper), counts >= 0
//   transition lines lower, upper, frequency_<unit>, uncertainty_<unit>[, force_<unit>]
//                    measured transition frequency between levels lower < upper (ordinary
//                    frequency, Hz-based units), its standard uncertainty (> 0), and the known
//                    linear force F of V + F x under which it was taken (default 0)
// Values are returned in SI (J, Hz, N); the commands convert them with the scenario's units.
//
// Errors: InputError with file, line, column (the character where the field starts) and the
// column name as key: malformed or non-finite numbers, negative counts, non-integer levels,
// unknown or missing columns (with a suggestion for a misspelt one), unknown units, rows with
// the wrong number of fields, non-contiguous bins, a file without data rows.
// Each kind has a text form (parses `text`; `file_name` is used only in messages; no file
// access) and a path form that reads the file and calls the text form.
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "solver/compare.hpp"

namespace trapwork {

// What every reader reports besides the values.
struct DataFileInfo {
  std::string file;                  // as given
  std::vector<std::string> columns;  // header names, in file order
  int rows = 0;                      // data rows used
  int skipped_rows = 0;              // rows with keep = 0 (blank and comment lines not counted)
  std::vector<int> skipped_lines;    // their line numbers
  std::optional<double> resolution_J;  // "# resolution:" comment, J
  std::string unit;                  // unit of the main quantity as written ("h*kHz")
};

struct WorkSamplesData {
  DataFileInfo info;
  std::vector<double> work_J;
  std::vector<int> lines;  // line number of each value
};
WorkSamplesData read_work_samples_text(std::string_view text, const std::string& file_name);
WorkSamplesData read_work_samples(const std::string& path);

struct LevelPairsData {
  DataFileInfo info;
  std::vector<LevelPair> runs;
  std::vector<int> lines;
};
LevelPairsData read_level_pairs_text(std::string_view text, const std::string& file_name);
LevelPairsData read_level_pairs(const std::string& path);

struct WorkHistogramData {
  DataFileInfo info;
  std::vector<double> edges_J;  // bins + 1 edges, ascending
  std::vector<double> counts;   // one per bin, >= 0
};
WorkHistogramData read_work_histogram_text(std::string_view text, const std::string& file_name);
WorkHistogramData read_work_histogram(const std::string& path);

struct MeasuredTransition {
  int lower = 0, upper = 1;
  double frequency_Hz = 0, uncertainty_Hz = 0;
  double force_N = 0;
  int line = 0;
};
struct TransitionLinesData {
  DataFileInfo info;
  std::vector<MeasuredTransition> transitions;
};
TransitionLinesData read_transition_lines_text(std::string_view text, const std::string& file_name);
TransitionLinesData read_transition_lines(const std::string& path);

// Work data of any of the three kinds, told apart by the header (work_*: samples; initial and
// final: level pairs; lower_*, upper_*, count: histogram). Throws InputError naming the three
// layouts when the header fits none.
enum class WorkDataKind { samples, level_pairs, histogram };
struct WorkData {
  WorkDataKind kind = WorkDataKind::samples;
  WorkSamplesData samples;
  LevelPairsData pairs;
  WorkHistogramData histogram;
  const DataFileInfo& info() const;
};
WorkData read_work_data_text(std::string_view text, const std::string& file_name);
WorkData read_work_data(const std::string& path);

}  // namespace trapwork
