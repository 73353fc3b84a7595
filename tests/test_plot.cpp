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
  SECTION("work distribution with a noisy series and its error bars (issue 17)") {
    WorkFigure f = work_figure();
    f.noisy = f.result;
    for (double& p : f.noisy->probability) p *= 0.9;
    f.noisy->error.assign(f.noisy->work.size(), 0.01);
    f.noisy->label = "with noise";
    f.notes = {"a further caption line"};
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

// ---- issue 16: ranges of the work figure ----------------------------------------------------

namespace {

// Lines broadened by a Gaussian of width sigma on the grid work_output.cpp uses (the lines
// holding all but 1e-6 of the largest, widened by 6 sigma, at sigma / 5).
void broaden(WorkSeries& s, double sigma) {
  double top = 0, lo = INFINITY, hi = -INFINITY;
  for (double p : s.probability) top = std::max(top, p);
  for (std::size_t i = 0; i < s.work.size(); ++i)
    if (s.probability[i] >= 1e-6 * top) lo = std::min(lo, s.work[i]), hi = std::max(hi, s.work[i]);
  lo -= 6 * sigma;
  hi += 6 * sigma;
  const int n = std::min(4001, static_cast<int>(std::ceil((hi - lo) / (sigma / 5))) + 1);
  for (int i = 0; i < n; ++i) {
    const double w = lo + (hi - lo) * i / (n - 1);
    double d = 0;
    for (std::size_t k = 0; k < s.work.size(); ++k)
      d += s.probability[k] * std::exp(-0.5 * std::pow((w - s.work[k]) / sigma, 2));
    s.density_work.push_back(w);
    s.density.push_back(d / (sigma * std::sqrt(2 * M_PI)));
  }
}

// Shaped like examples/tweezer_deform.toml's run (its lines.csv): the ground state followed
// adiabatically, one line at -19.8939 kB*uK with P = 1 - 4.4e-7, then every other level.
WorkFigure tweezer_like() {
  WorkFigure f;
  f.work_label = "work W (kB*uK)";
  f.density_label = "density (1/kB*uK)";
  const double w[] = {-19.8938620029266, -17.6054619346631, -15.350895517171, -13.1304788350937, -10.9445406843494};
  const double p[] = {0.999999563378004, 4.3661670901728453e-07, 2.847451761827139e-12, 2.598e-16, 5.7e-20};
  double mean = 0;
  for (int k = 0; k < 5; ++k) {
    f.result.work.push_back(w[k]);
    f.result.probability.push_back(p[k]);
    mean += w[k] * p[k];
  }
  for (int k = 0; k < 20; ++k) {  // the odd levels, forbidden by parity: P ~ 1e-29
    f.result.work.push_back(-18.75 + k);
    f.result.probability.push_back(3e-29);
  }
  f.resolution = 0.04681;
  f.resolution_source = "default: 1/20 of the lowest spacing";
  broaden(f.result, *f.resolution);
  f.mean_work = mean;
  return f;
}

// Shaped like examples/ion_translation.toml's run: a slow translation, the W = 0 lines carry all
// but 1e-4, sidebands at multiples of the 1.5 MHz spacing (h*kHz), resolution 75 h*kHz.
WorkFigure ion_translation_like() {
  WorkFigure f;
  f.work_label = "work W (h*kHz)";
  for (int k = -2; k <= 3; ++k) {
    const double top = k == 0 ? 0.9999 : std::pow(10.0, -3.0 - 3 * std::abs(k));
    for (int m = 0; m < 5; ++m) {  // several initial levels per sideband
      f.result.work.push_back(1500.0 * k + 0.01 * m * k);
      f.result.probability.push_back(top * std::pow(0.1, m));
    }
  }
  f.resolution = 75.12;
  broaden(f.result, *f.resolution);
  f.reference = f.result;
  f.mean_work = 0.5395;
  f.free_energy_change = 0;
  return f;
}

// Tick labels as plot.cpp prints them ("%.6g" of W - offset) at about `ticks` even steps.
std::vector<std::string> tick_labels(double lo, double hi, double offset, int ticks) {
  std::vector<std::string> labels;
  for (int i = 0; i <= ticks; ++i) {
    char text[64];
    std::snprintf(text, sizeof text, "%.6g", lo + (hi - lo) * i / ticks - offset);
    labels.push_back(text);
  }
  return labels;
}

double density_peak_work(const WorkSeries& s) {
  const auto peak = std::max_element(s.density.begin(), s.density.end());
  return s.density_work[static_cast<std::size_t>(peak - s.density.begin())];
}

}  // namespace

TEST_CASE("issue 16: the linear work panel shows one dominant line with its broadened density", "[plot]") {
  for (const WorkFigure& f : {tweezer_like(), ion_translation_like()}) {
    const WorkPanelRanges r = work_panel_ranges(f);
    const double sigma = *f.resolution, line = f.result.work[f.result.work.size() == 25 ? 0 : 10];
    INFO("dominant line " << line << ", range " << r.linear_lo << " .. " << r.linear_hi);
    // The dominant line and the density's width (+-2 sigma) and peak inside the linear panel:
    // the old rule (lines and markers only) gave a window 2e-5 kB*uK (tweezer) or 0.6 h*kHz
    // (ion) wide, in which the density was flat.
    CHECK(r.linear_lo < line - 2 * sigma);
    CHECK(r.linear_hi > line + 2 * sigma);
    CHECK(r.linear_hi - r.linear_lo < 10 * sigma);  // and not much more: the peak is resolved
    const double peak = density_peak_work(f.result);
    CHECK((peak > r.linear_lo && peak < r.linear_hi));
    // The density on its own axis, from its own maximum, with headroom: never cut.
    const double d_max = *std::max_element(f.result.density.begin(), f.result.density.end());
    CHECK(r.density_top == Approx(1.3 * d_max));
    CHECK(r.probability_top == Approx(1.3 * f.result.probability[f.result.work.size() == 25 ? 0 : 10]));
    // Tick labels that differ (at 5 to 12 ticks, as the panel draws 5 to 10).
    for (int ticks = 5; ticks <= 12; ++ticks) {
      auto labels = tick_labels(r.linear_lo, r.linear_hi, r.linear_offset, ticks);
      std::sort(labels.begin(), labels.end());
      CHECK(std::adjacent_find(labels.begin(), labels.end()) == labels.end());
    }
    CHECK(r.own_range);  // the log panel keeps the far lines
    CHECK(r.log_lo < f.result.work.front());
  }
}

TEST_CASE("issue 16: a panel narrow against its |W| gets tick labels relative to an offset", "[plot]") {
  WorkFigure f;
  f.probability_axis = ProbabilityAxis::linear;
  f.result.work = {2.5e6, 2.5e6 + 0.002, 2.5e6 + 0.004};  // lines 2 mJ apart at 2.5 kJ, say
  f.result.probability = {0.2, 0.5, 0.3};
  const WorkPanelRanges r = work_panel_ranges(f);
  CHECK(r.linear_lo < 2.5e6);
  CHECK(r.linear_hi > 2.5e6 + 0.004);
  CHECK(r.linear_offset != 0);
  CHECK(std::abs(r.linear_offset - 2.5e6) < r.linear_hi - r.linear_lo);
  auto labels = tick_labels(r.linear_lo, r.linear_hi, r.linear_offset, 8);
  std::sort(labels.begin(), labels.end());
  CHECK(std::adjacent_find(labels.begin(), labels.end()) == labels.end());
  // Without the offset the same ticks print alike: the check above can fail.
  auto plain = tick_labels(r.linear_lo, r.linear_hi, 0, 8);
  std::sort(plain.begin(), plain.end());
  CHECK(std::adjacent_find(plain.begin(), plain.end()) != plain.end());
  // A panel wide against its values keeps plain labels.
  CHECK(work_panel_ranges(tweezer_like()).log_offset == 0);
  const fs::path folder = fresh_folder("work_offset");
  check_figure_files(folder / "work", plot_work(folder / "work", f));
}

TEST_CASE("issue 16: the log panel leaves out and counts lines below its floor, thins crowded stems", "[plot]") {
  WorkFigure f = ion_translation_like();
  f.log_decades = 12;
  // The result crowded like the demo's: 3000 lines over 30 decades.
  f.result.work.clear();
  f.result.probability.clear();
  for (int i = 0; i < 3000; ++i) {
    f.result.work.push_back(i);
    f.result.probability.push_back(std::pow(10.0, -30.0 * i / 2999));
  }
  f.reference->work.clear();  // and a reference of 30 lines
  f.reference->probability.clear();
  for (int k = 0; k < 30; ++k) {
    f.reference->work.push_back(40.0 * k);
    f.reference->probability.push_back(1.0 / 30);
  }
  const double p_max = 1, floor = p_max * 1e-12;
  std::size_t below = 0;
  for (const auto* s : {&f.result, &*f.reference})
    for (double p : s->probability) below += p > floor ? 0 : 1;
  const WorkPanelRanges r = work_panel_ranges(f);
  CHECK(r.lines_below_floor == below);
  CHECK(r.lines_drawn + r.lines_below_floor == f.result.work.size() + f.reference->work.size());
  CHECK(r.log_floor == Approx(std::log10(floor)));
  CHECK(r.marker_scale[0] == 0);              // 1200 lines: stems only, thin
  CHECK(r.stem_width[0] == Approx(0.5));
  CHECK(r.marker_scale[1] == Approx(0.8));    // the reference's 30 lines keep their markers
  // The log panel's range is that of the lines drawn, not of those left out.
  CHECK(r.log_hi < 2000);  // the lines left out reach W = 2999
  const auto caption = work_caption(f, r);
  REQUIRE(caption.size() == 2);
  CHECK(caption[0].find("#gs = 75.12 h*kHz") != std::string::npos);
  CHECK(caption[1] == std::to_string(below) + " lines below P = 1e-12 not drawn in the log panel");
  const fs::path folder = fresh_folder("work_crowded");
  check_figure_files(folder / "work", plot_work(folder / "work", f));
  f.resolution = -1;
  CHECK_THROWS_WITH(work_panel_ranges(f), Catch::Contains("resolution must be finite and > 0"));
}

TEST_CASE("issue 16: a sweep figure draws log y axes and further panels", "[plot]") {
  SweepFigure f = sweep_figure();
  f.departure = Departure::absolute;
  f.log_y = true;
  SweepPanel residual{"|residual| (dimensionless)", {{"grid", {1, 2, 3}, {1e-3, 1e-9, 1e-14}, {}}}, {}, true};
  SweepPanel sd{"sd(W) (h*kHz)", {{"grid", {1, 2, 3}, {1, 2, -1}, {0.5, 0.5, 0.5}}}, {}, false};
  f.panels = {sd, residual};
  const fs::path folder = fresh_folder("sweep_panels");
  check_figure_files(folder / "sweep", plot_sweep(folder / "sweep", f));
  f.panels[0].curves = {{"bad", {2, 1}, {0, 0}}};
  CHECK_THROWS_WITH(plot_sweep(folder / "bad", f), Catch::Contains("x must be ascending"));
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

TEST_CASE("issue 17: a noisy series counts in the ranges, names the curves in the caption, refuses bad errors",
          "[plot]") {
  WorkFigure f = work_figure();
  const WorkPanelRanges without = work_panel_ranges(f);
  f.noisy = f.result;
  f.noisy->label = "with noise";
  f.noisy->work.push_back(f.result.work.back() + 500);  // heated beyond the noiseless lines
  f.noisy->probability.push_back(1e-4);
  f.noisy->error.assign(f.noisy->work.size(), 1e-3);
  const WorkPanelRanges with = work_panel_ranges(f);
  CHECK(with.log_hi > without.log_hi);  // the noisy line is drawn
  CHECK(with.lines_drawn + with.lines_below_floor ==
        without.lines_drawn + without.lines_below_floor + f.noisy->work.size());
  CHECK(with.lines_drawn > without.lines_drawn);
  CHECK(with.marker_scale[2] > 0);
  const auto caption = work_caption(f, with);
  bool curves = false;
  for (const auto& line : caption) curves = curves || line.find("dotted with noise") != std::string::npos;
  CHECK(curves);
  f.noisy->error.pop_back();
  CHECK_THROWS_WITH(work_panel_ranges(f), Catch::Contains("one standard error per noisy line"));
}

TEST_CASE("issue 19: calibration spreads as boxes only where a panel can show them, counted in the caption",
          "[plot]") {
  WorkFigure f = work_figure();
  f.result.error.assign(f.result.work.size(), 0.0);  // 0: no spread computed for that line
  f.result.error[1] = 0.04;   // P = 0.33: 20 % of the linear panel, 0.8 % of the 12-decade log panel
  f.result.error[10] = 3e-6;  // P = 3.5e-6: invisible on the linear panel, 1.1 decades (8 %) on the log one
  f.result.error[2] = 1e-9;   // visible on neither
  f.result.error_name = "sd (calibration)";
  const WorkPanelRanges r = work_panel_ranges(f);
  auto boxes_line = [&] {
    for (const auto& line : work_caption(f, r))
      if (line.rfind("red boxes:", 0) == 0) return line;
    return std::string();
  };
  CHECK(boxes_line().empty());  // capped bars (error_as_band false): no such caption line
  f.result.error_as_band = true;
  const std::string line = boxes_line();
  INFO(line);
  CHECK_THAT(line, Catch::Contains("1 of 3 lines in the linear panel, 1 in the log panel"));
  char ratio[32];
  std::snprintf(ratio, sizeof ratio, "%.2g", 3e-6 / f.result.probability[10]);
  CHECK_THAT(line, Catch::Contains(std::string("largest sd/P ") + ratio));
  const fs::path folder = fresh_folder("work_calibration_boxes");
  check_figure_files(folder / "work", plot_work(folder / "work", f));
}
