#pragma once
// Measured data files read by `trapwork compare` and `trapwork fit`.
//
// Layout (our own, shared by all four kinds): plain text, one row per line, fields separated by
// commas (when the header line has one) or else by spaces/tabs. Blank lines are skipped; '#'
// starts a comment (a whole line, or the rest of a row). The first other line is the header (a
// line with no number at all, see the header rule below):
// column names, in any order. Quantities carry their unit in the column name, written as the
// unit with '*' replaced by '_' (so trapwork's own CSV columns read back):
//   work_h_kHz        work in h*kHz         frequency_kHz      a frequency in kHz
//   lower_h_kHz       a bin edge            linear_coefficient_h_kHz/um   F of V + F x in h*kHz/um
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
//   populations      initial, final, population, uncertainty       the share of all runs found in
//                    each (initial, final) pair, as sideband analysis gives it, with its standard
//                    uncertainty; one row per pair, shares summing to 1 within 3 x their combined
//                    uncertainty. Read as level pairs: round(population x N) runs per pair, N from
//                    a comment line "# runs: 2000" or else N = sum p(1-p) / sum u^2 (binomial
//                    shares, common practice); LevelPairsData::origin says which.
//   histogram        lower_<energy unit>, upper_<energy unit>, count
//                    contiguous ascending bins [lower, upper), counts >= 0
//   transition lines lower, upper, frequency_<unit>, uncertainty_<unit>[, linear_coefficient_<unit>]
//                    measured transition frequency between levels lower < upper (ordinary
//                    frequency, Hz-based units), its standard uncertainty (> 0), and the known
//                    linear coefficient F of V + F x under which it was taken (default 0; the
//                    physical force is -F); a column force_<unit> is refused, naming the change
// Values are returned in SI (J, Hz, N); the commands convert them with the scenario's units.
//
// Errors: InputError with file, line, column (the character where the field starts) and the
// column name as key: malformed or non-finite numbers, negative counts, non-integer levels,
// unknown or missing columns (with a suggestion for a misspelt one), unknown units, rows with
// the wrong number of fields, non-contiguous bins, a file without data rows.
// Header rule (every table trapwork reads, data files and the two-column tables of scenarios):
// a header is a line in which no field is a number. A first line with only numbers is a data
// row (where the header may be left out); a first line that mixes numbers and other text is an
// error naming the field, so a data row with a typo ("1.0, 2.O") is never taken for a header.
// A UTF-8 byte-order mark at the start of a file is removed before anything is read.
// Each kind has a text form (parses `text`; `file_name` is used only in messages; no file
// access) and a path form that reads the file and calls the text form.
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "solver/compare.hpp"

namespace trapwork {

// ---- shared by every reader of tables and text files --------------------------------------

// `text` without a UTF-8 byte-order mark (EF BB BF) at its start; editors on Windows write one,
// and it would otherwise stick to the first field or key.
std::string_view without_byte_order_mark(std::string_view text);
// The whole file, without a byte-order mark. InputError naming the file and `what` ("the data
// file", "the scenario file") when it cannot be opened or is a folder.
std::string read_text_file(const std::string& path, const std::string& what);
// Whether `field` is one number, as the readers read it (an optional '+', then std::from_chars).
bool is_number(std::string_view field);

// A table file split into lines of fields, before any column is interpreted. Fields are
// separated by commas when the first line has one, else by spaces or tabs; '#' starts a
// comment; blank lines are skipped.
struct TableField {
  std::string text;
  int column = 0;  // 1-based character where the field starts
};
struct TableRow {
  int line = 0;
  std::vector<TableField> fields;
};
struct TableDirective {  // "# unit: h*kHz" as found
  std::string text;
  int line = 0, column = 0;
};
struct TextTable {
  std::string file;
  int header_line = 0;  // 0: no header (the first line was data)
  std::vector<TableField> names;
  std::vector<TableRow> rows;
  std::vector<int> comment_lines;  // whole-line comments, for the report
  std::optional<TableDirective> unit, resolution, runs;  // only read where a header is required
  // "header line 1 (x, V), comment lines 2, 5": what was read but is not data ("" if nothing)
  std::string skipped() const;
};
// Splits `text` by the header rule above. `columns` > 0: the number of fields of a table
// whose header may be left out (the two-column tables); 0: a header is required (data files).
// Every row must have as many fields as the header (or the first row). InputError (key "")
// with file, line and column: a mixed first line, an empty file, no data rows, a row with
// the wrong number of fields, an empty or repeated column name.
TextTable split_table(std::string_view text, const std::string& file, std::size_t columns = 0);

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
  // per value: half a unit of its last written digit (J), the rounding it may carry ("12.345"
  // h*kHz: 0.0005 h*kHz); NaN where the text is not a plain decimal number
  std::vector<double> precision_J;
  std::vector<int> lines;  // line number of each value
};
WorkSamplesData read_work_samples_text(std::string_view text, const std::string& file_name);
WorkSamplesData read_work_samples(const std::string& path);

struct LevelPairsData {
  DataFileInfo info;
  std::vector<LevelPair> runs;
  std::vector<int> lines;
  std::string origin;  // populations: where the runs come from ("" for one row per run)
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
  double force_N = 0;  // the linear coefficient F of V + F x, in N (J/m); the physical force is -F
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
