#pragma once
// Figures of the command-line tool, drawn with PLplot (C API) into a PNG (1200 x 800 px,
// "pngcairo" device) and an SVG ("svgcairo", or PLplot's own "svg" device where the cairo
// driver is missing) for one path stem: plot_levels("out/levels", f) writes out/levels.png
// and out/levels.svg. The folder must exist.
//
// The figures take plain data (no numerical types); numbers are in whatever display unit
// the caller chose, and the axis labels carrying those units come from the caller. Labels
// are PLplot text: '#' starts an escape sequence ("#gD" is a Greek Delta), UTF-8 is fine.
//
// Each file is drawn under a temporary name "<stem>.png.tmp-<pid>" in the same folder and
// renamed when complete; on any error the temporary files are removed and nothing is left.
// Every figure has its own PLplot stream, ended before the function returns, so figures
// share no state. PLplot itself is not thread-safe: call these from one thread at a time.
//
// Errors: std::invalid_argument for inconsistent data (sizes that differ, nothing to draw,
// non-finite coordinates where a curve needs them); std::runtime_error naming the file when
// a file cannot be written or PLplot reports an error.
#include <array>
#include <filesystem>
#include <optional>
#include <string>
#include <vector>

namespace trapwork {

// One potential with its levels, for plot_levels / plot_spectrum.
struct LevelsPanel {
  std::string title;               // panel title, e.g. "start" / "end"; may be empty
  std::vector<double> x;           // positions, ascending
  std::vector<double> potential;   // V(x), one per x, energy unit
  std::vector<double> energies;    // level energies, ascending, energy unit
  // |psi_n(x)|^2 on the same x for the first densities.size() levels (densities[n] belongs
  // to energies[n]); may hold fewer entries than energies, or none. Any unit: each density
  // is scaled so that its peak reaches LevelsFigure::density_height times the gap to the
  // next level that is not near-degenerate with it (the gap below, for the highest level),
  // at most that times the mean level spacing, and drawn on its level line.
  std::vector<std::vector<double>> densities;
  // Hard walls (a [box]) at these positions (x unit), drawn as thick vertical lines over the
  // whole energy range; empty for none.
  std::vector<double> walls;
};

struct LevelsFigure {
  std::string title;               // figure title
  std::string x_label;             // e.g. "position x (um)"
  std::string energy_label;        // e.g. "energy E (h*kHz)"
  std::vector<LevelsPanel> panels;  // one, or two drawn side by side with one energy axis
  double density_height = 0.7;     // peak of a scaled density, in units of the level gap; (0, 1]
  // Axis ranges; when absent: energy from min V to the highest level plus headroom for the
  // legend, x over the classically allowed region of the highest level widened by 30%.
  std::optional<double> x_min, x_max, energy_min, energy_max;
};

// Potential curve, each level as a horizontal segment across the classically allowed region
// (where V < E, split where the region is), and the densities sitting on their levels.
std::vector<std::filesystem::path> plot_levels(const std::filesystem::path& stem,
                                               const LevelsFigure& figure);
// The spectrum of one potential: plot_levels with figure.panels.size() == 1.
std::vector<std::filesystem::path> plot_spectrum(const std::filesystem::path& stem,
                                                 const LevelsFigure& figure);

// Work values W_i with probabilities P_i (the lines), and optionally a smooth density.
struct WorkSeries {
  std::string label;                  // legend text, e.g. "quartic trap (grid)"
  std::vector<double> work;           // W_i, work unit
  std::vector<double> probability;    // P_i, one per W_i, >= 0
  std::vector<double> density_work;   // grid of the broadened density, ascending; may be empty
  std::vector<double> density;        // density per work unit, one per density_work
  std::vector<double> error;          // standard error of each P_i, drawn as +-1 bars; empty: none
  std::string error_name = "s.e.";    // what the bars are, for the legend ("sd (calibration)")
  // true: each +-error drawn as a light red box behind its marker, twice its width, without caps,
  // and only where taller than 6 % of its panel; the caption counts the boxes drawn
  // per panel and states the largest error / P; false: red bars with caps wherever error > 0
  bool error_as_band = false;
};

enum class ProbabilityAxis {
  linear_and_log,  // linear stems, and a second panel below with log10 P
  linear,          // linear stems only
  log,             // log10 P stems only
};

struct WorkFigure {
  std::string title;
  std::string work_label;             // e.g. "work W (h*kHz)"
  std::string density_label;          // right-hand axis, e.g. "density (1/(h*kHz))"
  WorkSeries result;                  // drawn as filled stems and a solid curve
  std::optional<WorkSeries> reference;  // e.g. harmonic prediction: hollow stems, dashed curve
  // e.g. with noise during the protocol: red stems with diamonds and their error bars, a dotted
  // curve, drawn a little left of the result's stems
  std::optional<WorkSeries> noisy;
  std::vector<std::string> notes;     // further caption lines (after the densities' line)
  std::optional<double> mean_work;      // vertical marker "<W>", work unit
  std::optional<double> free_energy_change;  // vertical marker "Delta F", work unit
  ProbabilityAxis probability_axis = ProbabilityAxis::linear_and_log;
  double log_decades = 12;            // log panel shows P down to max P * 10^-log_decades; > 0
  // Gaussian width sigma (work unit) with which the densities were broadened, stated in the
  // caption with where it came from (e.g. "default: 1/20 of the lowest spacing"); the linear
  // panel widens the lines that carry the probability by 3 sigma on each side.
  std::optional<double> resolution;
  std::string resolution_source;
};

// The ranges plot_work draws with (pure; the Python module's plot.py ports it line by line as
// work_panel_ranges, keep the two identical):
// - log panel: lines with P >= the floor max P * 10^-log_decades (the others are left out and
//   counted), and the markers, padded by 4%; y in log10 P from the floor to log10 max P + 0.5
//   (+ 0.2 log_decades when it is alone and carries the marker labels);
// - linear panel: the lines carrying all but 1e-3 of the probability at each end, widened by
//   3 resolution (when densities are drawn) and by the density's peak and the markers, padded
//   by 8%; a panel alone ("linear") also covers every drawn line; when that range is not
//   narrower than half the log panel's, both panels share the union of the two;
// - y: stems 0 .. 1.3 max P, density 0 .. 1.3 max density (room above the peaks for the
//   marker labels, which sit at 83% and 92% of the height);
// - x offset: where a panel's width is below 1e-3 of its largest |W| (a line dominating at a
//   large W), its ticks show W - offset, the offset rounded to 10 ticks steps, so that tick
//   labels differ; 0 otherwise;
// - log-panel markers of a series at scale 0.8 up to 40 of its lines drawn, 0.8 sqrt(40 / n)
//   above, none below 0.2 (light stems, each top a small dot), stems 2.2 px wide thinned alike
//   down to 0.5.
struct WorkPanelRanges {
  bool own_range = false;             // linear and log panels have different x ranges
  double linear_lo = 0, linear_hi = 1, linear_offset = 0;  // work unit
  double log_lo = 0, log_hi = 1, log_offset = 0;           // work unit
  double probability_top = 1;         // linear panel's P axis top
  double density_top = 0;             // right axis top; 0: no density axis
  double log_floor = -12, log_top = 0;  // log10 P
  std::size_t lines_drawn = 0;        // lines (all series) at or above the floor
  std::size_t lines_below_floor = 0;  // lines (all series) below it, left out of the log panel
  // Log panel's stem markers (character scale; 0: none) and stem widths, of the result, the
  // reference and the noisy series, each by the number of its own lines drawn.
  std::array<double, 3> marker_scale = {0.8, 0.8, 0.8};
  std::array<double, 3> stem_width = {2.2, 2.2, 2.2};
};
WorkPanelRanges work_panel_ranges(const WorkFigure& figure);

// The caption lines under a work figure: the resolution of the densities and where it came
// from; the lines left out of the log panel ("312 lines below P = 1e-13 not drawn").
std::vector<std::string> work_caption(const WorkFigure& figure, const WorkPanelRanges& ranges);

// Stems P_i at W_i on the left axis; the broadened density on a right-hand axis of its own.
std::vector<std::filesystem::path> plot_work(const std::filesystem::path& stem,
                                             const WorkFigure& figure);

// Results over a swept parameter, with +-1 standard deviation.
struct SweepPoints {
  std::string label;                  // e.g. "<W> (grid), +-1 std. dev. of W"
  std::vector<double> x;              // swept parameter
  std::vector<double> y;              // e.g. <W>
  std::vector<double> spread;         // +- this around y (one per y), or empty for none
};
struct SweepCurve {
  std::string label;                  // e.g. "harmonic prediction"
  std::vector<double> x;              // ascending
  std::vector<double> y;
};

enum class Departure {
  none,      // one panel
  relative,  // second panel: (y - c(x)) / c(x), c = first curve interpolated linearly;
             // points where c(x) = 0 are left out
  absolute,  // second panel: y - c(x)
};

// A further panel of a sweep figure, below the main one (and its departure panel), sharing
// its x axis: e.g. sd(W) and the Jarzynski residual over a sweep.
struct SweepPanel {
  std::string y_label;                // with its unit
  std::vector<SweepPoints> points;
  std::vector<SweepCurve> curves;
  bool log_y = false;                 // logarithmic y axis (values <= 0 left out)
};

struct SweepFigure {
  std::string title;
  std::string x_label;                // e.g. "duration tau (us)"
  std::string y_label;                // e.g. "mean work <W> (h*kHz)"
  std::vector<SweepPoints> points;    // markers with error bars (or a band)
  std::vector<SweepCurve> curves;     // analytic curves as lines
  bool spread_as_band = false;        // shaded band instead of error bars
  bool log_x = false;                 // logarithmic x axis (x > 0)
  bool log_y = false;                 // logarithmic y axis of the main panel (values <= 0 left out)
  Departure departure = Departure::none;  // needs at least one curve
  std::string departure_label;        // second panel's y label; empty: a default
  std::vector<SweepPanel> panels;     // further panels, drawn below in this order
};

std::vector<std::filesystem::path> plot_sweep(const std::filesystem::path& stem,
                                              const SweepFigure& figure);

// ---- several quantities against one x (time traces, protocol schedules) ---------------------

// One panel of a StackedFigure: curves (SweepCurve: ascending x, a vertical step where two
// successive x are equal) in the colours ink, blue, orange, green, red, purple, grey in turn.
struct StackPanel {
  std::string y_label;               // with its unit, e.g. "<x> (nm)"
  std::vector<SweepCurve> curves;
  bool markers = false;              // a marker at every curve point (the observation points)
};
struct StackedFigure {
  std::string title;
  std::string x_label;               // shared x axis, e.g. "time t (us)"
  std::vector<StackPanel> panels;    // 1 to 6, top to bottom; x range shared (union of curves)
};
// The panels stacked over one x axis, each with its legend above it.
std::vector<std::filesystem::path> plot_stack(const std::filesystem::path& stem, const StackedFigure& figure);

// ---- measured data against a model (trapwork compare) -----------------------------------------

// Counts of measured runs on bins against the counts the model expects there.
struct ComparisonFigure {
  std::string title;
  std::string work_label;               // e.g. "work W (h*kHz)"
  std::string count_label;              // e.g. "runs per bin"
  std::vector<double> edges;            // bin edges, ascending, bins + 1 of them
  std::vector<double> observed;         // measured runs per bin, >= 0
  std::vector<double> expected;         // model's expected runs per bin, >= 0
  std::string observed_label = "measured";
  std::string expected_label = "model";
  std::vector<double> curve_work;       // optional smooth model curve (e.g. N x bin width x density)
  std::vector<double> curve;            // one per curve_work; may be empty
  std::optional<double> model_mean, data_mean;  // vertical markers, work unit
};

// The measured counts as a filled histogram with sqrt(count) error bars, the model's expected
// counts as a step line, the optional curve dashed, and below, in a second panel, the pull
// (observed - expected) / sqrt(expected) of each bin expecting at least one run.
std::vector<std::filesystem::path> plot_comparison(const std::filesystem::path& stem,
                                                   const ComparisonFigure& figure);

// ---- a map over two swept parameters (trapwork sweep with a two-axis grid) ---------------------

// One coloured cell per point of a grid of (x, y) values, a colour bar, and optionally contour
// lines of another quantity on its own grid (e.g. an analytic prediction), labelled with their
// values in the colour quantity's unit.
struct SweepMapFigure {
  std::string stem;                    // file stem, e.g. "sweep_map_mean" (the caller adds the folder)
  std::string title, x_label, y_label;
  std::string colour_label;            // e.g. "<W> (h*kHz)"
  std::vector<double> x, y;            // cell centres, ascending, at least one each
  std::vector<std::vector<double>> z;  // z[i][j] at (x[i], y[j]); NaN: a blank cell (a failed point)
  std::vector<double> contour_x, contour_y;       // contour grid, ascending (empty: no contours)
  std::vector<std::vector<double>> contour_z;     // contour_z[i][j] at (contour_x[i], contour_y[j]), finite
  std::string contour_label;                      // what the contours show, written above the map
  // A scatter map (a list of points, not a grid): when point_x is not empty, one coloured
  // marker per point (point_z; NaN: an open marker, a failed point) instead of the cells; x, y
  // and z are then unused.
  std::vector<double> point_x, point_y, point_z;
};
// The map: cells coloured on a blue-to-yellow scale between the smallest and largest finite z
// (one colour if they are equal), edges half way between neighbouring centres; or, for a
// scatter map, markers on the same scale, the axes spanning the points with a margin.
std::vector<std::filesystem::path> plot_sweep_map(const std::filesystem::path& stem, const SweepMapFigure& figure);

}  // namespace trapwork
