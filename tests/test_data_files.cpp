// Readers of measured data files (solver/scenario/data_files): every kind, the units in column
// names and in "# unit:" lines, the skipped-row count, and each error with its file:line:column.
#include "solver/scenario/data_files.hpp"

#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <fstream>
#include <string>

#include "scratch_files.hpp"
#include "solver/errors.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/units.hpp"

using namespace trapwork;
using Catch::Matchers::Contains;

namespace {

constexpr double h = si::planck_h;

// Runs f, which must throw InputError at file `data.csv` line `line` (and column, when > 0)
// whose message contains every one of `words`.
template <class F>
void check_error(F f, int line, int column, const std::vector<std::string>& words) {
  try {
    f();
    FAIL("no exception thrown");
  } catch (const InputError& e) {
    INFO(e.what());
    CHECK(e.file == "data.csv");
    CHECK(e.line == line);
    if (column > 0) CHECK(e.column == column);
    for (const auto& w : words) CHECK_THAT(std::string(e.what()), Contains(w));
  }
}

}  // namespace

TEST_CASE("work samples with the unit in the column name or in a unit line", "[data_files]") {
  const auto d = read_work_samples_text("# invented\nwork_h_kHz\n1.5\n\n-2e1  # a comment\n+3\n", "data.csv");
  REQUIRE(d.work_J.size() == 3);
  // Values times h * 1 kHz, exact up to the rounding of one product.
  CHECK(d.work_J[0] == Approx(1.5 * h * 1e3).epsilon(1e-15));
  CHECK(d.work_J[1] == Approx(-20 * h * 1e3).epsilon(1e-15));
  CHECK(d.work_J[2] == Approx(3 * h * 1e3).epsilon(1e-15));
  CHECK(d.lines == std::vector<int>{3, 5, 6});
  CHECK(d.info.rows == 3);
  CHECK(d.info.skipped_rows == 0);
  CHECK(d.info.unit == "h*kHz");
  CHECK(!d.info.resolution_J);

  const auto u = read_work_samples_text("# unit: kB*uK\n# resolution: 0.5 h*kHz\nwork\n2\n4\n", "data.csv");
  REQUIRE(u.work_J.size() == 2);
  CHECK(u.work_J[0] == Approx(2 * si::boltzmann * 1e-6).epsilon(1e-15));
  REQUIRE(u.info.resolution_J);
  CHECK(*u.info.resolution_J == Approx(0.5 * h * 1e3).epsilon(1e-15));
  CHECK(u.info.unit == "kB*uK");
}

TEST_CASE("rows with keep = 0 are skipped and counted", "[data_files]") {
  const auto d = read_work_samples_text("work_h_Hz, keep\n1, 1\n2, 0\n3, 1\n4, 0\n", "data.csv");
  CHECK(d.work_J.size() == 2);
  CHECK(d.info.rows == 2);
  CHECK(d.info.skipped_rows == 2);
  CHECK(d.info.skipped_lines == std::vector<int>{3, 5});
  check_error([] { read_work_samples_text("work_h_Hz keep\n1 0\n2 0\n", "data.csv"); }, 0, 0,
              {"no rows left", "keep = 0"});
  check_error([] { read_work_samples_text("work_h_Hz keep\n1 1\n2 yes\n", "data.csv"); }, 3, 3, {"keep = yes"});
}

TEST_CASE("level pairs, histogram and transition lines", "[data_files]") {
  const auto p = read_level_pairs_text("final initial\n2 0\n1 1\n", "data.csv");
  REQUIRE(p.runs.size() == 2);
  CHECK(p.runs[0].initial == 0);
  CHECK(p.runs[0].final == 2);
  CHECK(p.runs[1].initial == 1);

  const auto hist = read_work_histogram_text("lower_h_kHz,upper_h_kHz,count\n-1,0,3\n0,1.5,0\n1.5,4,12\n", "data.csv");
  REQUIRE(hist.edges_J.size() == 4);
  CHECK(hist.edges_J[3] == Approx(4 * h * 1e3).epsilon(1e-15));
  CHECK(hist.counts == std::vector<double>{3, 0, 12});

  const auto t = read_transition_lines_text(
      "lower,upper,frequency_MHz,uncertainty_Hz,linear_coefficient_h_kHz/um,keep\n0,1,1.0001,20,0,1\n1,2,1.0003,25,-5,1\n"
      "0,2,2.0004,30,0,0\n",
      "data.csv");
  REQUIRE(t.transitions.size() == 2);
  CHECK(t.info.skipped_rows == 1);
  CHECK(t.transitions[1].lower == 1);
  CHECK(t.transitions[1].upper == 2);
  CHECK(t.transitions[1].frequency_Hz == Approx(1.0003e6).epsilon(1e-15));
  CHECK(t.transitions[1].uncertainty_Hz == Approx(25).epsilon(1e-15));
  // -5 h*kHz/um = -5 h 1e3 J / 1e-6 m
  CHECK(t.transitions[1].force_N == Approx(-5 * h * 1e3 / 1e-6).epsilon(1e-15));
  CHECK(t.transitions[1].line == 3);
  // Without a force column, every force is 0; the unit line serves frequency and uncertainty.
  const auto u = read_transition_lines_text("# unit: kHz\nlower upper frequency uncertainty\n0 1 1000.1 0.02\n",
                                            "data.csv");
  REQUIRE(u.transitions.size() == 1);
  CHECK(u.transitions[0].frequency_Hz == Approx(1.0001e6).epsilon(1e-15));
  CHECK(u.transitions[0].uncertainty_Hz == Approx(20).epsilon(1e-12));
  CHECK(u.transitions[0].force_N == 0);
}

TEST_CASE("the kind of work data is told by the header", "[data_files]") {
  CHECK(read_work_data_text("work_h_kHz\n1\n2\n", "data.csv").kind == WorkDataKind::samples);
  CHECK(read_work_data_text("initial,final\n0,1\n", "data.csv").kind == WorkDataKind::level_pairs);
  CHECK(read_work_data_text("lower_h_kHz upper_h_kHz count\n0 1 2\n", "data.csv").kind == WorkDataKind::histogram);
  check_error([] { read_work_data_text("# header\nenergy_h_kHz\n1\n", "data.csv"); }, 2, 1,
              {"fits no kind of work data", "initial, final"});
}

TEST_CASE("malformed data give file, line, column and column name", "[data_files]") {
  // not a number, with the column where the field starts
  check_error([] { read_work_samples_text("work_h_kHz\n1\n  1.2.3\n", "data.csv"); }, 3, 3,
              {"data.csv:3:3", "work_h_kHz = 1.2.3", "a number"});
  // non-finite values and overflow
  check_error([] { read_work_samples_text("work_h_kHz\nnan\n", "data.csv"); }, 2, 1, {"a finite number"});
  check_error([] { read_work_samples_text("work_h_kHz\ninf\n", "data.csv"); }, 2, 1, {"a finite number"});
  check_error([] { read_work_samples_text("work_h_kHz\n1e999\n", "data.csv"); }, 2, 1, {"a number"});
  // an empty comma field
  check_error([] { read_work_samples_text("work_h_kHz,keep\n,1\n", "data.csv"); }, 2, 1, {"(empty)"});
  // wrong number of fields, pointing at the first extra one
  check_error([] { read_work_samples_text("work_h_kHz\n1 2\n", "data.csv"); }, 2, 3, {"2 fields", "1 fields"});
  // unknown unit, wrong dimension, missing unit
  check_error([] { read_work_samples_text("work_h_kHzz\n1\n", "data.csv"); }, 1, 1, {"h*kHzz", "unknown unit"});
  check_error([] { read_work_samples_text("work_um\n1\n", "data.csv"); }, 1, 1, {"not an energy unit"});
  check_error([] { read_work_samples_text("work\n1\n", "data.csv"); }, 1, 1, {"without its unit", "# unit:"});
  check_error([] { read_work_samples_text("# unit: furlong\nwork\n1\n", "data.csv"); }, 1, 9, {"unit = furlong"});
  check_error([] { read_work_samples_text("# unit: kHz\n# unit: MHz\nwork\n1\n", "data.csv"); }, 2, 9,
              {"given twice"});
  check_error([] { read_work_samples_text("# resolution: -1 h*kHz\nwork_h_kHz\n1\n", "data.csv"); }, 1, 15,
              {"resolution", ">= 0"});
  // unknown and misspelt columns, duplicates, missing ones
  check_error([] { read_work_samples_text("wrok_h_kHz\n1\n", "data.csv"); }, 1, 1,
              {"not a column of a work samples file", "did you mean 'work_h_kHz'"});
  check_error([] { read_work_samples_text("work_h_kHz work_h_Hz\n1 2\n", "data.csv"); }, 1, 12, {"second work"});
  check_error([] { read_level_pairs_text("initial\n1\n", "data.csv"); }, 1, 0, {"final", "missing"});
  // empty files
  check_error([] { read_work_samples_text("", "data.csv"); }, 0, 0, {"empty data file"});
  check_error([] { read_work_samples_text("# only comments\n\n", "data.csv"); }, 0, 0, {"empty data file"});
  check_error([] { read_work_samples_text("work_h_kHz\n# no rows\n", "data.csv"); }, 0, 0, {"no data rows"});
  // level indices
  check_error([] { read_level_pairs_text("initial final\n0 -1\n", "data.csv"); }, 2, 3, {"final = -1", "level index"});
  check_error([] { read_level_pairs_text("initial final\n0.5 1\n", "data.csv"); }, 2, 1, {"initial = 0.5"});
  // histograms: negative and fractional counts, bins out of order or with gaps
  check_error([] { read_work_histogram_text("lower_h_kHz upper_h_kHz count\n0 1 -2\n", "data.csv"); }, 2, 5,
              {"count = -2", ">= 0"});
  check_error([] { read_work_histogram_text("lower_h_kHz upper_h_kHz count\n0 1 2.5\n", "data.csv"); }, 2, 5,
              {"whole number"});
  check_error([] { read_work_histogram_text("lower_h_kHz upper_h_kHz count\n0 1 2\n1.5 2 3\n", "data.csv"); }, 3, 1,
              {"contiguous"});
  check_error([] { read_work_histogram_text("lower_h_kHz upper_h_kHz count\n1 0 2\n", "data.csv"); }, 2, 3,
              {"above the lower edge"});
  // transition lines: level order, uncertainty, frequency, force unit
  check_error([] { read_transition_lines_text("lower upper frequency_kHz uncertainty_kHz\n1 1 10 1\n", "data.csv"); },
              2, 3, {"upper = 1", "above lower"});
  check_error([] { read_transition_lines_text("lower upper frequency_kHz uncertainty_kHz\n0 1 10 0\n", "data.csv"); },
              2, 8, {"uncertainty_kHz = 0", "> 0"});
  check_error([] { read_transition_lines_text("lower upper frequency_kHz uncertainty_kHz linear_coefficient_kHz\n0 1 10 1 0\n",
                                              "data.csv"); },
              1, 43, {"linear_coefficient_kHz", "force unit"});
  // issue 16: the column of F in V + F x was named force_<unit>; an old file is refused, not read
  // with a sign it may not mean
  check_error([] { read_transition_lines_text("lower upper frequency_kHz uncertainty_kHz force_h_kHz/um\n0 1 10 1 0\n",
                                              "data.csv"); },
              1, 43, {"force_h_kHz/um", "linear_coefficient_<unit>", "minus the physical force", "flip the sign"});
  check_error([] { read_transition_lines_text("lower upper frequency uncertainty_kHz\n0 1 10 1\n", "data.csv"); }, 1,
              13, {"without its unit"});
}

TEST_CASE("path forms read the file, and name it when it cannot be opened", "[data_files]") {
  const auto dir = trapwork_test::scratch_dir("test-data-files", "paths");
  const auto path = (dir / "samples.csv").string();
  std::ofstream(path) << "work_h_kHz\n1\n2\n";
  const auto d = read_work_samples(path);
  CHECK(d.info.file == path);
  CHECK(d.work_J.size() == 2);
  CHECK(read_work_data(path).kind == WorkDataKind::samples);
  try {
    read_transition_lines((dir / "missing.csv").string());
    FAIL("no exception thrown");
  } catch (const InputError& e) {
    CHECK_THAT(std::string(e.what()), Contains("missing.csv") && Contains("cannot open"));
  }
}

// ---- issue 14: header rule, byte-order mark, histogram counts ---------------------------

TEST_CASE("issue 14: a header is a line with no number at all; a typo in the first row is an error",
          "[data_files]") {
  // A two-column table (header optional): names, numbers, or an error naming the bad field.
  const TextTable named = split_table("x_um, V_uK\n# measured 3 May\n-1, 1\n0, 0\n1, 1\n", "data.csv", 2);
  CHECK(named.header_line == 1);
  CHECK(named.rows.size() == 3);
  CHECK(named.skipped() == "header line 1 (x_um, V_uK), comment line 2");
  const TextTable bare = split_table("-1 1\n0 0\n1 1\n", "data.csv", 2);
  CHECK(bare.header_line == 0);
  CHECK(bare.rows.size() == 3);
  CHECK(bare.rows.front().line == 1);
  CHECK(bare.skipped().empty());
  // the first row with a typo is neither a header nor data (it used to be dropped as a header)
  check_error([] { split_table("-1, 1O\n0, 0\n1, 1\n", "data.csv", 2); }, 1, 5,
              {"1O", "mixes numbers and text", "a header is a line with no number at all"});
  // data files need their header: a first line holding a number says the names are missing
  check_error([] { read_work_samples_text("1.25\n2.5\n", "data.csv"); }, 1, 1,
              {"1:1: 1.25: column names", "a header is a line with no number at all"});
  check_error([] { read_work_samples_text("work_h_kHz, 2\n1, 1\n", "data.csv"); }, 1, 13, {"1:13: 2: column names"});
}

TEST_CASE("issue 14: a UTF-8 byte-order mark is dropped from tables, data files and scenarios", "[data_files]") {
  const std::string bom = "\xEF\xBB\xBF";
  CHECK(without_byte_order_mark(bom + "x") == "x");
  CHECK(without_byte_order_mark("x") == "x");
  // the first row stays data (before: a BOM made it text, so it was dropped as a header)
  const TextTable t = split_table(bom + "-1, 1\n0, 0\n1, 1\n", "data.csv", 2);
  CHECK(t.header_line == 0);
  REQUIRE(t.rows.size() == 3);
  CHECK(t.rows.front().fields.front().text == "-1");
  // a data file's first column name reads as written
  const auto d = read_work_samples_text(bom + "work_h_kHz\n1\n", "data.csv");
  CHECK(d.work_J.size() == 1);
  // a scenario and the table file it names, both written with a BOM, through the path forms
  const auto dir = trapwork_test::scratch_dir("test-data-files", "bom");
  std::ofstream(dir / "trap.csv", std::ios::binary) << bom << "-2, 40\n-1, 10\n0, 0\n1, 10\n2, 40\n";
  std::ofstream(dir / "trap.toml", std::ios::binary)
      << bom << "[particle]\nmass = \"87 u\"\n[[potential]]\nname = \"data\"\nshape = \"table\"\n"
      << "file = \"trap.csv\"\nx_unit = \"um\"\nenergy_unit = \"kB*uK\"\n";
  const Scenario s = read_scenario((dir / "trap.toml").string());
  REQUIRE(s.terms.size() == 1);
  const auto& settings = s.terms[0].settings;
  const auto rows = std::find_if(settings.begin(), settings.end(), [](const auto& kv) { return kv.first == "rows"; });
  REQUIRE(rows != settings.end());
  CHECK(rows->second == "5");
  CHECK(read_text_file((dir / "trap.csv").string(), "the data file").substr(0, 2) == "-2");
}

TEST_CASE("issue 14: histogram counts are whole numbers read exactly and summed in 64 bits", "[data_files]") {
  const std::string head = "lower_h_kHz upper_h_kHz count\n";
  // 1e18 runs per bin: the total 2e18 is beyond a 32-bit int (it used to give negative runs and
  // a total variation above 1)
  const auto big = read_work_histogram_text(head + "0 1 1e18\n1 2 1000000000000000000\n", "data.csv");
  REQUIRE(big.counts.size() == 2);
  CHECK(big.counts[0] == 1e18);
  const std::vector<WorkLine> model = work_lines({{0.5 * h * 1e3, 0.5}, {1.5 * h * 1e3, 0.5}});
  const WorkComparison c = compare_histogram(model, big.edges_J, big.counts, CompareOptions{});
  CHECK(c.runs == 2000000000000000000);
  CHECK(c.total_variation >= 0);
  CHECK(c.total_variation <= 1);
  CHECK(c.total_variation < 1e-12);  // the counts match the model exactly
  // not a whole number, not exactly a double (2^53 + 1), beyond 63 bits, a total beyond 63 bits
  check_error([&] { read_work_histogram_text(head + "0 1 2.5\n", "data.csv"); }, 2, 5, {"whole number"});
  check_error([&] { read_work_histogram_text(head + "0 1 9007199254740993\n", "data.csv"); }, 2, 5,
              {"count = 9007199254740993", "a double holds exactly"});
  check_error([&] { read_work_histogram_text(head + "0 1 1e19\n", "data.csv"); }, 2, 5, {"below 2^63"});
  check_error([&] { read_work_histogram_text(head + "0 1 1.5e-2147483648\n", "data.csv"); }, 2, 5, {"count"});
  CHECK(read_work_histogram_text(head + "0 1 0.0e-2147483647\n1 2 12.5e1\n", "data.csv").counts ==
        std::vector<double>{0, 125});
  check_error([&] { read_work_histogram_text(head + "0 1 5e18\n1 2 5e18\n", "data.csv"); }, 3, 5,
              {"total stays below 2^63"});
  // the library refuses what it cannot count too
  CHECK_THROWS_WITH(compare_histogram(model, {0.0, 1.0, 2.0}, {1e19, 1}, CompareOptions{}), Contains("below 2^63"));
  CHECK_THROWS_WITH(compare_histogram(model, {0.0, 1.0, 2.0}, {5e18, 5e18}, CompareOptions{}),
                    Contains("total stays below 2^63"));
}
