// Issue 20: sweeps over several parameters (a grid of [[sweep.axis]] tables, or a list of
// points), the map pictures of a two-parameter grid, and --shard I/N with trapwork merge.
#include <catch2/catch.hpp>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>

#include "solver/errors.hpp"
#include "solver/scenario/scenario.hpp"
#include "solver/scenario/tasks.hpp"
#include "solver/scenario/work_output.hpp"
#include "sweep_tables.hpp"

namespace fs = std::filesystem;
using namespace trapwork;
using trapwork_test::read_all;

namespace {
const std::string base = trapwork_test::grid_sweep_text.substr(0, trapwork_test::grid_sweep_text.find("[[sweep.axis]]"));

std::string error_of(const std::string& text) {
  try {
    (void)read_scenario_text(text, "s.toml");
  } catch (const InputError& e) {
    return e.what();
  }
  return "no error";
}
}  // namespace

TEST_CASE("issue 20: [[sweep.axis]] tables sweep a full grid, the first axis slowest", "[sweep][issue20]") {
  const Scenario s = read_scenario_text(base + R"([[sweep.axis]]
parameter = "protocol.duration"
from = "1 us"
to = "2 us"
points = 3
[[sweep.axis]]
parameter = "initial.mean_phonons"
values = [0.2, 0.1]
)", "s.toml");
  REQUIRE(s.sweep);
  const SweepSpec& w = *s.sweep;
  REQUIRE(w.axes.size() == 2);
  CHECK(w.grid);
  REQUIRE(w.points() == 6);
  CHECK(w.axes[0].unit == "us");
  // point p: duration index p / 2, phonon index p % 2 (nested loops in the order written)
  for (std::size_t p = 0; p < 6; ++p) {
    CHECK(w.value_index(p, 0) == p / 2);
    CHECK(w.value_index(p, 1) == p % 2);
    const Scenario at = at_sweep_point(s, p);
    CHECK(at.protocol->duration == w.axes[0].values[p / 2]);
    CHECK(at.work->initial_given == "mean_phonons = " + w.axes[1].given[p % 2]);
  }
  CHECK(w.point_text(3) == "protocol.duration = 1.5 us, initial.mean_phonons = 0.1");
}

TEST_CASE("issue 20: parameters with values = [[...], ...] sweep a list of points in the order written",
          "[sweep][issue20]") {
  const Scenario s = read_scenario_text(base + R"([sweep]
parameters = ["protocol.duration", "trap.frequency"]
values = [["1 us", "1 MHz"], ["0.5 us", "1.2 MHz"], ["2 us", "1 MHz"]]
)", "s.toml");
  const SweepSpec& w = *s.sweep;
  CHECK_FALSE(w.grid);
  REQUIRE(w.points() == 3);
  CHECK(w.axes[1].unit == "MHz");
  const Scenario second = at_sweep_point(s, 1);
  CHECK(second.protocol->duration == w.axes[0].values[1]);
  CHECK(std::abs(w.axes[0].values[1] / w.axes[0].internal_per_unit - 0.5) < 1e-12);
  CHECK(std::abs(w.axes[1].values[1] / w.axes[1].internal_per_unit - 1.2) < 1e-12);
  CHECK(w.point_values(2) == std::vector<double>{w.axes[0].values[2], w.axes[1].values[2]});
}

TEST_CASE("issue 20: bad multi-parameter sweeps are refused naming the key", "[sweep][issue20]") {
  // a point with the wrong number of values
  CHECK_THAT(error_of(base + "[sweep]\nparameters = [\"protocol.duration\", \"trap.frequency\"]\n"
                             "values = [[\"1 us\", \"1 MHz\"], [\"2 us\"]]\n"),
             Catch::Contains("sweep.values[2]") && Catch::Contains("2 values, one per parameter"));
  // two forms at once
  CHECK_THAT(error_of(base + "[sweep]\nparameter = \"protocol.duration\"\nvalues = [\"1 us\"]\n"
                             "[[sweep.axis]]\nparameter = \"trap.frequency\"\nvalues = [\"1 MHz\"]\n"),
             Catch::Contains("only one of parameter, [[sweep.axis]] and parameters"));
  // one parameter on two axes
  CHECK_THAT(error_of(base + "[[sweep.axis]]\nparameter = \"protocol.duration\"\nvalues = [\"1 us\"]\n"
                             "[[sweep.axis]]\nparameter = \"protocol.duration\"\nvalues = [\"2 us\"]\n"),
             Catch::Contains("sweep.axis[2].parameter") && Catch::Contains("axis 1 sweeps it"));
  // a misspelt key of an axis, with the suggestion
  CHECK_THAT(error_of(base + "[[sweep.axis]]\nparameter = \"protocol.duration\"\nvaluez = [\"1 us\"]\n"),
             Catch::Contains("sweep.axis[1].valuez") && Catch::Contains("values"));
  // a value of the wrong dimension inside a point
  CHECK_THAT(error_of(base + "[sweep]\nparameters = [\"protocol.duration\", \"trap.frequency\"]\n"
                             "values = [[\"1 us\", \"1 us\"]]\n"),
             Catch::Contains("sweep.values[1][2]"));
  // a unit-less sweep of a duration, and a point that breaks the protocol check at its own key
  CHECK_THAT(error_of(base + "[[sweep.axis]]\nparameter = \"protocol.duration\"\nvalues = [1]\n"),
             Catch::Contains("sweep.axis[1].values[1]"));
}

TEST_CASE("issue 20: the maps of a two-parameter grid: cells by value, failed points blank, harmonic contours",
          "[sweep][issue20]") {
  // Durations given in descending order: the map's x axis ascends all the same.
  const Scenario s = read_scenario_text(trapwork_test::grid_sweep_text, "s.toml");
  const SweepSpec& w = *s.sweep;
  std::vector<SweepRow> rows;
  for (std::size_t p = 0; p < w.points(); ++p) {
    SweepRow r = p == 3 ? failed_sweep_row(w, p, "refused") : SweepRow{};
    r.point = p;
    r.values = w.point_values(p);
    if (p != 3) {
      r.mean = 1e-3 * double(p + 1);  // internal energy unit: h*MHz here
      r.sd = 2e-3;
      r.jarzynski_residual = -1e-9;
    }
    rows.push_back(r);
  }
  const auto maps = sweep_map_figures(s, rows);
  REQUIRE(maps.size() == 3);
  const SweepMapFigure& mean = maps[0];
  CHECK(mean.stem == "sweep_map_mean");
  CHECK(mean.x == std::vector<double>{0.7, 1.3});
  CHECK(mean.y == std::vector<double>{0.1, 0.5});
  CHECK(mean.x_label == "protocol.duration (us)");
  // point 0 is (1.3 us, 0.1): x index 1, y index 0, <W> 1e-3 h*MHz = 1 h*kHz
  CHECK(std::abs(mean.z[1][0] - 1.0) < 1e-12);
  CHECK(std::abs(mean.z[0][0] - 3.0) < 1e-12);  // point 2: (0.7 us, 0.1)
  CHECK(std::isnan(mean.z[0][1]));              // point 3 failed: a blank cell
  CHECK(maps[2].stem == "sweep_map_jarzynski");
  CHECK(std::abs(maps[2].z[1][1] - 1e-9) < 1e-20);
  // The contours: <W> = 2 m v^2 sin^2(omega tau / 2), v = 30 nm / tau, for any temperature
  // (Husimi 1953; Talkner, Burada & Hanggi 2008, from memory), in h*kHz (CODATA 2018).
  REQUIRE(mean.contour_x.size() == 40);
  REQUIRE(mean.contour_y.size() == 40);
  CHECK(mean.contour_x.front() == Approx(0.7));
  CHECK(mean.contour_x.back() == Approx(1.3));
  const double m = 40 * 1.66053906660e-27, omega = 2 * M_PI * 1e6, h_kHz = 6.62607015e-34 * 1e3;
  for (std::size_t i = 0; i < 40; i += 13)
    for (std::size_t j = 0; j < 40; j += 19) {
      const double tau = mean.contour_x[i] * 1e-6, v = 30e-9 / tau;
      CHECK(mean.contour_z[i][j] == Approx(2 * m * v * v * std::pow(std::sin(omega * tau / 2), 2) / h_kHz).epsilon(1e-6));
    }
  // sd W = hbar omega |alpha| sqrt(2 nbar + 1), |alpha|^2 = m v^2 (1 - cos omega tau) / (hbar omega)
  const double hbar = 6.62607015e-34 / (2 * M_PI);
  const SweepMapFigure& sd = maps[1];
  for (std::size_t i = 0; i < 40; i += 13)
    for (std::size_t j = 0; j < 40; j += 19) {
      const double tau = sd.contour_x[i] * 1e-6, v = 30e-9 / tau, nbar = sd.contour_y[j];
      const double alpha2 = m * v * v * (1 - std::cos(omega * tau)) / (hbar * omega);
      CHECK(sd.contour_z[i][j] ==
            Approx(hbar * omega * std::sqrt(alpha2 * (2 * nbar + 1)) / h_kHz).epsilon(1e-6));
    }
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-map", "maps");
  CHECK(plot_sweep_maps(dir, s, rows).size() == 6);
  CHECK(fs::file_size(dir / "sweep_map_mean.png") > 1000);
  // One parameter, or a list of points: no maps.
  Scenario list = read_scenario_text(base + "[sweep]\nparameters = [\"protocol.duration\", \"initial.mean_phonons\"]\n"
                                            "values = [[\"1 us\", 0.1], [\"2 us\", 0.2]]\n", "s.toml");
  CHECK(sweep_map_figures(list, {}).empty());
}

TEST_CASE("issue 20: a two-parameter sweep's table, and --shard I/N joined by trapwork merge", "[sweep][issue20]") {
  using trapwork_test::run_in;
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-map", "shards");
  std::ofstream(dir / "grid.toml") << trapwork_test::grid_sweep_text;
  const std::string trapwork = trapwork_test::trapwork_binary();
  REQUIRE(run_in(dir, trapwork + " sweep grid.toml -o whole --jobs 2") == 0);
  const std::string whole = read_all(dir / "whole" / "sweep.csv");
  CHECK(whole.rfind("point,protocol_duration_us,initial_mean_phonons_internal,mean_work_h_kHz,", 0) == 0);
  const auto rows = trapwork_test::csv_rows(whole);
  REQUIRE(rows.size() == 4);
  const double expected[4][3] = {{1, 1.3, 0.1}, {2, 1.3, 0.5}, {3, 0.7, 0.1}, {4, 0.7, 0.5}};  // point order
  for (std::size_t r = 0; r < 4; ++r)
    for (std::size_t c = 0; c < 3; ++c) CHECK(rows[r][c] == expected[r][c]);
  for (const char* map : {"sweep_map_mean.png", "sweep_map_sd.svg", "sweep_map_jarzynski.png"})
    CHECK(fs::exists(dir / "whole" / map));
  CHECK_THAT(read_all(dir / "stdout.txt"), Catch::Contains("protocol.duration x initial.mean_phonons (a grid), 4 points"));

  // Shards 1/3, 2/3, 3/3: points 1 and 4, 2, 3 (numbered from 1), each in its own folder.
  for (int i = 1; i <= 3; ++i)
    REQUIRE(run_in(dir, trapwork + " sweep grid.toml --shard " + std::to_string(i) + "/3 -o shard" +
                            std::to_string(i) + " --jobs 1 --quiet") == 0);
  CHECK(trapwork_test::csv_rows(read_all(dir / "shard1" / "sweep.csv")).size() == 2);
  CHECK_THAT(read_all(dir / "shard2" / "sweep-shard.txt"), Catch::Contains("shard 2/3"));
  REQUIRE(run_in(dir, trapwork + " merge merged shard3 shard1 shard2") == 0);
  trapwork_test::check_same_table(read_all(dir / "merged" / "sweep.csv"), whole);
  CHECK(fs::exists(dir / "merged" / "sweep_map_mean.png"));

  // Refused: a shard missing (its points listed), a shard given twice, another scenario.
  CHECK(run_in(dir, trapwork + " merge m2 shard1 shard3") == 2);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("1 of 4 missing (points 2,") && Catch::Contains("2/3"));
  CHECK_FALSE(fs::exists(dir / "m2" / "sweep.csv"));
  CHECK(run_in(dir, trapwork + " merge m2 shard1 shard2 shard3 shard1") == 2);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("in one shard only: point(s) 1, 4"));
  REQUIRE(run_in(dir, trapwork + " sweep grid.toml --shard 2/3 -o other --jobs 1 --quiet --set 'trap.frequency=\"1.1 MHz\"'") == 0);
  CHECK(run_in(dir, trapwork + " merge m2 shard1 other shard3") == 2);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("shards of one scenario") && Catch::Contains("fingerprint"));
  CHECK_FALSE(fs::exists(dir / "m2" / "sweep.csv"));
  // A bad shard argument.
  CHECK(run_in(dir, trapwork + " sweep grid.toml --shard 4/3 -o bad") == 2);
  CHECK_THAT(read_all(dir / "stderr.txt"), Catch::Contains("--shard") && Catch::Contains("1 <= I <= N"));
}

namespace {
// Rows for every point of `s`: <W> = 1e-3 (p + 1) h*MHz (internal energy unit here), point `failed` failed.
std::vector<SweepRow> fake_rows(const Scenario& s, std::size_t failed) {
  const SweepSpec& w = *s.sweep;
  std::vector<SweepRow> rows;
  for (std::size_t p = 0; p < w.points(); ++p) {
    SweepRow r = p == failed ? failed_sweep_row(w, p, "refused") : SweepRow{};
    r.point = p;
    r.values = w.point_values(p);
    if (p != failed) {
      r.mean = 1e-3 * double(p + 1);
      r.sd = 2e-3;
      r.jarzynski_residual = -1e-9;
    }
    rows.push_back(r);
  }
  return rows;
}
}  // namespace

TEST_CASE("sweep maps of a two-parameter list (markers) and a three-parameter grid (one map per value of the third)",
          "[sweep][issue20]") {
  const fs::path dir = trapwork_test::scratch_dir("test-sweep-map", "scatter");
  const Scenario list = read_scenario_text(base + "[sweep]\nparameters = [\"protocol.duration\", \"initial.mean_phonons\"]\n"
                                                  "values = [[\"1 us\", 0.1], [\"2 us\", 0.2], [\"1.5 us\", 0.4]]\n", "s.toml");
  CHECK(sweep_map_refusal(list).empty());
  auto maps = sweep_map_figures(list, fake_rows(list, 1));
  REQUIRE(maps.size() == 3);
  CHECK(maps[0].stem == "sweep_map_mean");
  CHECK(maps[0].point_x == std::vector<double>{1, 2, 1.5});
  CHECK(maps[0].point_y == std::vector<double>{0.1, 0.2, 0.4});
  CHECK(std::abs(maps[0].point_z[2] - 3.0) < 1e-12);  // point 2: 3e-3 h*MHz = 3 h*kHz
  CHECK(std::isnan(maps[0].point_z[1]));             // the failed point: an open marker
  CHECK(maps[0].contour_x.size() == 40);              // the harmonic prediction over the points' range
  CHECK(maps[0].contour_x.front() == Approx(1.0));
  CHECK(maps[0].contour_y.back() == Approx(0.4));
  CHECK(plot_sweep_maps(dir, list, fake_rows(list, 1)).size() == 6);
  CHECK(fs::file_size(dir / "sweep_map_mean.png") > 1000);

  // A 2 x 2 x 2 grid: the maps over duration and phonons at each trap frequency.
  const Scenario grid = read_scenario_text(trapwork_test::grid_sweep_text +
                                               "[[sweep.axis]]\nparameter = \"trap.frequency\"\nvalues = [\"1 MHz\", \"1.1 MHz\"]\n",
                                           "s.toml");
  REQUIRE(grid.sweep->points() == 8);
  CHECK(sweep_map_names(grid).size() == 12);  // 3 maps x 2 frequencies x png/svg
  maps = sweep_map_figures(grid, fake_rows(grid, 8));
  REQUIRE(maps.size() == 6);
  CHECK(maps[0].stem == "sweep_map_mean_trap.frequency_1_MHz");
  CHECK(maps[3].stem == "sweep_map_mean_trap.frequency_1.1_MHz");
  CHECK_THAT(maps[3].title, Catch::Contains("at trap.frequency = 1.1 MHz"));
  // point p = 4 i + 2 j + k (duration i, phonons j, frequency k): point 3 is (1.3 us, 0.5, 1.1 MHz),
  // cell x 1 (durations ascend: 0.7, 1.3), y 1; <W> 4e-3 h*MHz = 4 h*kHz
  CHECK(std::abs(maps[3].z[1][1] - 4.0) < 1e-12);
  CHECK(std::abs(maps[0].z[1][1] - 3.0) < 1e-12);  // point 2: (1.3 us, 0.5, 1 MHz)
  // The contours of the 1.1 MHz maps: <W> = 2 m v^2 sin^2(omega tau / 2), v = 30 nm / tau
  // (Husimi 1953, from memory), at omega = 2 pi 1.1 MHz, in h*kHz (CODATA 2018).
  REQUIRE(maps[3].contour_x.size() == 40);
  const double m = 40 * 1.66053906660e-27, omega = 2 * M_PI * 1.1e6, h_kHz = 6.62607015e-34 * 1e3;
  for (std::size_t i = 0; i < 40; i += 13) {
    const double tau = maps[3].contour_x[i] * 1e-6, v = 30e-9 / tau;
    CHECK(maps[3].contour_z[i][7] == Approx(2 * m * v * v * std::pow(std::sin(omega * tau / 2), 2) / h_kHz).epsilon(1e-6));
  }
  const fs::path slices = trapwork_test::scratch_dir("test-sweep-map", "slices");
  CHECK(plot_sweep_maps(slices, grid, fake_rows(grid, 8)).size() == 12);
  CHECK(fs::exists(slices / "sweep_map_sd_trap.frequency_1.1_MHz.png"));
  CHECK(fs::exists(slices / "sweep_map_jarzynski_trap.frequency_1_MHz.svg"));

  // No map, with the reason: a list over three parameters, four parameters, a list with two
  // points at the same values; the report says so.
  const Scenario list3 = read_scenario_text(
      base + "[sweep]\nparameters = [\"protocol.duration\", \"initial.mean_phonons\", \"trap.frequency\"]\n"
             "values = [[\"1 us\", 0.1, \"1 MHz\"], [\"2 us\", 0.2, \"1.1 MHz\"]]\n", "s.toml");
  CHECK_THAT(sweep_map_refusal(list3), Catch::Contains("a list of points over three parameters"));
  CHECK(sweep_map_figures(list3, fake_rows(list3, 9)).empty());
  CHECK(sweep_map_names(list3).empty());
  const Scenario four = read_scenario_text(trapwork_test::grid_sweep_text +
                                               "[[sweep.axis]]\nparameter = \"trap.frequency\"\nvalues = [\"1 MHz\"]\n"
                                               "[[sweep.axis]]\nparameter = \"trap.centre\"\nvalues = [\"0 nm\"]\n",
                                           "s.toml");
  CHECK_THAT(sweep_map_refusal(four), Catch::Contains("4 parameters"));
  CHECK(sweep_map_figures(four, fake_rows(four, 9)).empty());
  const Scenario twice = read_scenario_text(base + "[sweep]\nparameters = [\"protocol.duration\", \"initial.mean_phonons\"]\n"
                                                   "values = [[\"1 us\", 0.1], [\"1 us\", 0.1]]\n", "s.toml");
  CHECK_THAT(sweep_map_refusal(twice), Catch::Contains("two points of the list at the same values"));
  CHECK(sweep_map_figures(twice, fake_rows(twice, 9)).empty());
  SweepOutcome outcome;
  outcome.scenario = list3;
  std::ostringstream report;
  print_sweep_report(report, outcome, {}, "");
  CHECK_THAT(report.str(), Catch::Contains("no map: a list of points over three parameters"));
  outcome.scenario = grid;
  report.str("");
  print_sweep_report(report, outcome, {}, "");
  CHECK_THAT(report.str(), Catch::Contains("one map per value of trap.frequency"));
}
