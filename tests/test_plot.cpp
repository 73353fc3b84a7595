// Figures: each writes a PNG and an SVG with the right signatures, atomically (no temporary
// files remain), leaves PLplot's current stream and the open files as they were, and fails
// with a clear message (and no files) on an unwritable place or inconsistent data.
#include <catch2/catch.hpp>
#include <plplot/plplot.h>
#include <unistd.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <iterator>

#include "solver/scenario/plot.hpp"

namespace fs = std::filesystem;
using namespace trapwork;

namespace {

// A fresh, empty folder for one test case under the build tree.
fs::path fresh_folder(const std::string& name) {
  const fs::path folder = fs::path(TRAPWORK_BINARY_DIR) / "test_plot_output" /
                          name;
  fs::remove_all(folder);
  fs::create_directories(folder);
  return folder;
}

std::string read_all(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  return {std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>()};
}

std::vector<std::string> names_in(const fs::path& folder) {
  std::vector<std::string> names;
  for (const auto& entry : fs::directory_iterator(folder))
    names.push_back(entry.path().filename().string());
  std::sort(names.begin(), names.end());
  return names;
}

std::size_t open_descriptors() {
  return static_cast<std::size_t>(
      std::distance(fs::directory_iterator("/proc/self/fd"), fs::directory_iterator()));
}

// The two files of `stem` exist with a PNG signature (PNG specification, section 5.2) and
// an XML/SVG opening, and nothing else is in the folder.
void check_figure_files(const fs::path& stem, const std::vector<fs::path>& written) {
  REQUIRE(written.size() == 2);
  CHECK(written[0] == fs::path(stem.string() + ".png"));
  CHECK(written[1] == fs::path(stem.string() + ".svg"));
  const std::string png = read_all(written[0]);
  const std::string svg = read_all(written[1]);
  REQUIRE(png.size() > 8);
  CHECK(png.compare(0, 8, "\x89PNG\r\n\x1a\n") == 0);
  REQUIRE(!svg.empty());
  CHECK((svg.rfind("<?xml", 0) == 0 || svg.rfind("<svg", 0) == 0));
  CHECK(svg.find("<svg") != std::string::npos);
  CHECK(svg.find("</svg>") != std::string::npos);  // complete, not cut off
  CHECK(names_in(stem.parent_path()) ==
        std::vector<std::string>{stem.filename().string() + ".png",
                                 stem.filename().string() + ".svg"});
}

// Invented data: a trap with a small quartic term, in units of hbar*omega and the oscillator
// length; densities of the harmonic states (shape only matters here).
LevelsPanel quartic_trap(const std::string& title, double centre) {
  LevelsPanel p;
  p.title = title;
  for (int i = 0; i <= 300; ++i) {
    const double x = -7 + 14.0 * i / 300, y = x - centre;
    p.x.push_back(x);
    p.potential.push_back(0.5 * y * y + 0.01 * y * y * y * y);
  }
  for (int n = 0; n < 6; ++n) p.energies.push_back(n + 0.5 + 0.0075 * (2 * n * n + 2 * n + 1));
  for (int n = 0; n < 3; ++n) {
    std::vector<double> d;
    for (double x : p.x) {
      const double y = x - centre;
      const double h = n == 0 ? 1 : n == 1 ? 2 * y : 4 * y * y - 2;
      d.push_back(h * h * std::exp(-y * y));
    }
    p.densities.push_back(d);
  }
  return p;
}

LevelsFigure levels_figure(int panels) {
  LevelsFigure f;
  f.title = "levels";
  f.x_label = "position x (um)";
  f.energy_label = "energy E (h*kHz)";
  f.panels.push_back(quartic_trap(panels == 2 ? "start" : "", 0));
  if (panels == 2) f.panels.push_back(quartic_trap("end", 1.5));
  return f;
}

WorkFigure work_figure() {
  WorkFigure f;
  f.title = "work distribution";
  f.work_label = "work W (h*kHz)";
  f.density_label = "density (1/(h*kHz))";
  double p = std::exp(-1.5);
  for (int k = 0; k < 25; ++k) {
    f.result.work.push_back(k);
    f.result.probability.push_back(p);
    p *= 1.5 / (k + 1);
  }
  for (int i = 0; i <= 200; ++i) {
    const double w = -2 + 30.0 * i / 200;
    double d = 0;
    for (std::size_t k = 0; k < f.result.work.size(); ++k)
      d += f.result.probability[k] * std::exp(-0.5 * std::pow((w - f.result.work[k]) / 0.3, 2));
    f.result.density_work.push_back(w);
    f.result.density.push_back(d / (0.3 * std::sqrt(2 * M_PI)));
  }
  f.result.label = "grid";
  f.reference = f.result;
  f.reference->label = "harmonic";
  f.mean_work = 1.5;
  f.free_energy_change = 0;
  return f;
}

SweepFigure sweep_figure() {
  SweepFigure f;
  f.title = "sweep";
  f.x_label = "duration tau (us)";
  f.y_label = "mean work <W> (h*kHz)";
  SweepCurve c{"harmonic", {}, {}};
  SweepPoints p{"grid", {}, {}, {}};
  for (int i = 1; i <= 100; ++i) {
    c.x.push_back(0.05 * i);
    c.y.push_back(1 + 1 / (0.05 * i));
  }
  for (int i = 1; i <= 10; ++i) {
    p.x.push_back(0.5 * i);
    p.y.push_back(1.02 * (1 + 1 / (0.5 * i)));
    p.spread.push_back(0.1);
  }
  f.points = {p};
  f.curves = {c};
  f.departure = Departure::relative;
  return f;
}

}  // namespace

TEST_CASE("each figure writes a PNG and an SVG and nothing else", "[plot]") {
  const fs::path folder = fresh_folder("figures");
  PLINT stream_before = -1;
  plgstrm(&stream_before);
  const std::size_t descriptors_before = open_descriptors();

  SECTION("levels, two panels") {
    const fs::path stem = folder / "levels";
    check_figure_files(stem, plot_levels(stem, levels_figure(2)));
  }
  SECTION("spectrum, one panel") {
    const fs::path stem = folder / "spectrum";
    check_figure_files(stem, plot_spectrum(stem, levels_figure(1)));
  }
  SECTION("work distribution, each probability axis") {
    WorkFigure f = work_figure();
    for (auto axis : {ProbabilityAxis::linear_and_log, ProbabilityAxis::linear,
                      ProbabilityAxis::log}) {
      f.probability_axis = axis;
      const fs::path sub = folder / std::to_string(static_cast<int>(axis));
      fs::create_directories(sub);
      check_figure_files(sub / "work", plot_work(sub / "work", f));
    }
  }
  SECTION("work distribution without reference, density or markers") {
    WorkFigure f = work_figure();
    f.reference.reset();
    f.result.density.clear();
    f.result.density_work.clear();
    f.mean_work.reset();
    f.free_energy_change.reset();
    check_figure_files(folder / "work", plot_work(folder / "work", f));
  }
  SECTION("sweep: relative departure, absolute with a band on a log axis, single panel") {
    SweepFigure f = sweep_figure();
    check_figure_files(folder / "sweep", plot_sweep(folder / "sweep", f));
    fs::remove(folder / "sweep.png");
    fs::remove(folder / "sweep.svg");
    f.departure = Departure::absolute;
    f.spread_as_band = true;
    f.log_x = true;
    check_figure_files(folder / "sweep", plot_sweep(folder / "sweep", f));
    fs::remove(folder / "sweep.png");
    fs::remove(folder / "sweep.svg");
    f.departure = Departure::none;
    check_figure_files(folder / "sweep", plot_sweep(folder / "sweep", f));
  }
  SECTION("a second call replaces the files") {
    const fs::path stem = folder / "levels";
    plot_levels(stem, levels_figure(1));
    check_figure_files(stem, plot_levels(stem, levels_figure(2)));
  }

  PLINT stream_after = -2;
  plgstrm(&stream_after);
  CHECK(stream_after == stream_before);
  CHECK(open_descriptors() == descriptors_before);  // PLplot closed every file it was given
}

TEST_CASE("an unwritable place throws with the path and leaves nothing", "[plot]") {
  const fs::path folder = fresh_folder("unwritable");
  // A regular file where a folder is expected: fopen fails with ENOTDIR, also for root.
  std::ofstream(folder / "not_a_folder") << "x";
  const fs::path stem = folder / "not_a_folder" / "levels";
  const std::size_t descriptors_before = open_descriptors();
  try {
    plot_levels(stem, levels_figure(1));
    FAIL("no exception");
  } catch (const std::runtime_error& e) {
    const std::string message = e.what();
    CHECK(message.find(stem.string() + ".png") != std::string::npos);
    CHECK(message.find("cannot write plot") != std::string::npos);
  }
  CHECK(names_in(folder) == std::vector<std::string>{"not_a_folder"});
  CHECK(open_descriptors() == descriptors_before);
}

TEST_CASE("inconsistent data is refused before any file is written", "[plot]") {
  const fs::path folder = fresh_folder("bad_data");
  LevelsFigure levels = levels_figure(1);
  levels.panels[0].potential.pop_back();
  CHECK_THROWS_WITH(plot_levels(folder / "a", levels),
                    Catch::Contains("plot_levels") && Catch::Contains("sizes differ"));
  CHECK_THROWS_AS(plot_spectrum(folder / "b", levels_figure(2)), std::invalid_argument);

  WorkFigure work = work_figure();
  work.result.probability[3] = -0.1;
  CHECK_THROWS_WITH(plot_work(folder / "c", work),
                    Catch::Contains("plot_work") && Catch::Contains("line 3"));

  SweepFigure sweep = sweep_figure();
  sweep.curves.clear();
  CHECK_THROWS_WITH(plot_sweep(folder / "d", sweep), Catch::Contains("analytic curve"));
  CHECK(names_in(folder).empty());
}

TEST_CASE("issue 16: walls on a levels figure and stacked panels draw; bad ones are refused", "[plot]") {
  const fs::path folder = fresh_folder("issue16_walls"), stacks = fresh_folder("issue16_stack");
  LevelsFigure levels = levels_figure(1);
  const double left = levels.panels[0].x.front(), right = levels.panels[0].x.back();
  levels.panels[0].walls = {left, right};
  check_figure_files(folder / "walls", plot_spectrum(folder / "walls", levels));
  levels.panels[0].walls = {left, std::nan("")};
  CHECK_THROWS_WITH(plot_spectrum(folder / "bad_walls", levels), Catch::Contains("wall positions must be finite"));

  StackedFigure stack;
  stack.title = "traces";
  stack.x_label = "time t (us)";
  StackPanel position{"<x> (nm)", {{"<x>(t)", {0, 1, 2, 3}, {0, 0.5, 1.5, 3}}, {"centre", {0, 3}, {0, 3}}}, true};
  StackPanel step{"trap.frequency (MHz)", {{"sudden", {-1, 0, 0, 1}, {1, 1, 2, 2}}}, false};
  stack.panels = {position, step};
  check_figure_files(stacks / "stack", plot_stack(stacks / "stack", stack));
  stack.panels[1].curves[0].x = {0, 1, 0.5, 2};
  CHECK_THROWS_WITH(plot_stack(stacks / "bad_stack", stack), Catch::Contains("ascending"));
  stack.panels.clear();
  CHECK_THROWS_WITH(plot_stack(stacks / "empty_stack", stack), Catch::Contains("one to six panels"));
  CHECK(names_in(folder) == std::vector<std::string>{"walls.png", "walls.svg"});  // nothing of the refused ones
  CHECK(names_in(stacks) == std::vector<std::string>{"stack.png", "stack.svg"});
}
