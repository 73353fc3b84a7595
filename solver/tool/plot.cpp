// Figures with PLplot: see plot.hpp. Layout is in normalised page coordinates (plvpor),
// data in world coordinates (plwind); every figure runs in its own stream (plmkstrm ...
// plend1), with the error code captured through plsError instead of printed.
#include "solver/tool/plot.hpp"

#include <plplot/plplot.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <functional>
#include <limits>
#include <stdexcept>
#include <system_error>

namespace trapwork {
namespace {

namespace fs = std::filesystem;
using Vec = std::vector<double>;

constexpr PLINT page_width_px = 1200;
constexpr PLINT page_height_px = 800;
constexpr double text_scale = 1.1;  // base character size (plschr scale) of every figure

// Colour map 0 of every figure (index: role). Index 0 is the background.
enum Colour : PLINT {
  white = 0, ink = 1, blue = 2, orange = 3, green = 4, red = 5, purple = 6, grey = 7,
  blue_fill = 8, orange_fill = 9, grid_grey = 10, green_fill = 11, purple_fill = 12,
};
constexpr int colour_count = 13;
constexpr std::array<PLINT, colour_count> colour_r = {255, 0, 31, 230, 44, 200, 120, 110, 31, 230, 225, 44, 120};
constexpr std::array<PLINT, colour_count> colour_g = {255, 0, 100, 120, 150, 30, 60, 110, 100, 120, 225, 150, 60};
constexpr std::array<PLINT, colour_count> colour_b = {255, 0, 180, 20, 60, 40, 160, 110, 180, 20, 225, 60, 160};
constexpr std::array<PLFLT, colour_count> colour_a = {1, 1, 1, 1, 1, 1, 1, 1, 0.25, 0.3, 1, 0.25, 0.25};

// Solid, and the two PLplot dash patterns used here (pllsty numbers).
constexpr PLINT solid = 1, dashed = 3, dotted = 2;

[[noreturn]] void bad_data(const std::string& figure, const std::string& what) {
  throw std::invalid_argument(figure + ": " + what);
}

bool device_available(const std::string& name) {
  constexpr int capacity = 128;
  const char* menu[capacity];
  const char* names[capacity];
  const char** menu_ptr = menu;
  const char** names_ptr = names;
  int count = capacity;
  plgDevs(&menu_ptr, &names_ptr, &count);
  for (int i = 0; i < count; ++i)
    if (name == names_ptr[i]) return true;
  return false;
}

// One PLplot stream drawing into `file` (which it owns from construction on). end() finishes
// the page, closes the file and throws if PLplot reported an error; the destructor ends the
// stream silently if end() was not reached, and makes the previous stream current again.
class Stream {
 public:
  Stream(std::FILE* file, const char* device, const fs::path& target) : target_(target) {
    plgstrm(&previous_);
    plmkstrm(&id_);
    if (id_ < 0) {
      std::fclose(file);
      throw std::runtime_error("cannot draw " + target_.string() + ": no free PLplot stream");
    }
    plsError(&error_code_, error_message_);
    plsdev(device);
    plsfile(file);
    file_ = file;
    plspage(0, 0, page_width_px, page_height_px, 0, 0);
    plscmap0a(colour_r.data(), colour_g.data(), colour_b.data(), colour_a.data(), colour_count);
    plinit();
    // From plinit on the driver owns the file and closes it in plend1.
    initialised_ = true;
    check();
    pladv(0);
    plschr(0, text_scale);
  }
  Stream(const Stream&) = delete;
  Stream& operator=(const Stream&) = delete;
  ~Stream() { close(); }

  void check() const {
    if (error_code_ != 0)
      throw std::runtime_error("PLplot failed drawing " + target_.string() + ": " +
                               trimmed(error_message_));
  }
  void end() {
    close();
    check();
  }

 private:
  static std::string trimmed(const char* text) {
    std::string s(text);
    while (!s.empty() && (s.front() == '\n' || s.front() == ' ')) s.erase(s.begin());
    while (!s.empty() && (s.back() == '\n' || s.back() == ' ')) s.pop_back();
    return s;
  }
  void close() {
    if (closed_) return;
    closed_ = true;
    plsstrm(id_);
    plend1();
    if (!initialised_ && file_ != nullptr) std::fclose(file_);
    plsstrm(previous_);
  }

  fs::path target_;
  PLINT previous_ = 0;
  PLINT id_ = -1;
  PLINT error_code_ = 0;
  char error_message_[1024] = {};
  std::FILE* file_ = nullptr;
  bool initialised_ = false;
  bool closed_ = false;
};

fs::path temporary_name(const fs::path& target) {
  return fs::path(target.string() + ".tmp-" + std::to_string(::getpid()));
}

void render(const fs::path& target, const fs::path& temporary, const char* device,
            const std::function<void()>& draw) {
  std::FILE* file = std::fopen(temporary.c_str(), "wb");
  if (file == nullptr)
    throw std::runtime_error("cannot write plot " + target.string() + ": " + std::strerror(errno));
  Stream stream(file, device, target);
  draw();
  stream.check();
  stream.end();
  std::error_code ec;
  if (fs::file_size(temporary, ec) == 0 || ec)
    throw std::runtime_error("cannot write plot " + target.string() + ": PLplot wrote no data");
}

// Draws the figure into <stem>.png and <stem>.svg atomically (see plot.hpp).
std::vector<fs::path> write_png_and_svg(const fs::path& stem, const std::function<void()>& draw) {
  if (!device_available("pngcairo"))
    throw std::runtime_error("cannot write plot " + stem.string() +
                             ".png: PLplot has no pngcairo device (Debian: plplot-driver-cairo)");
  const char* svg_device = device_available("svgcairo") ? "svgcairo" : "svg";
  const std::vector<fs::path> targets = {fs::path(stem.string() + ".png"),
                                         fs::path(stem.string() + ".svg")};
  const std::vector<fs::path> temporaries = {temporary_name(targets[0]),
                                             temporary_name(targets[1])};
  try {
    render(targets[0], temporaries[0], "pngcairo", draw);
    render(targets[1], temporaries[1], svg_device, draw);
    for (std::size_t i = 0; i < targets.size(); ++i) fs::rename(temporaries[i], targets[i]);
  } catch (...) {
    std::error_code ignored;
    for (const auto& t : temporaries) fs::remove(t, ignored);
    throw;
  }
  return targets;
}

// ---- small drawing helpers (act on the current stream) -------------------------------

struct Range {
  double lo = std::numeric_limits<double>::infinity();
  double hi = -std::numeric_limits<double>::infinity();
  void add(double v) {
    if (std::isfinite(v)) {
      lo = std::min(lo, v);
      hi = std::max(hi, v);
    }
  }
  void add(const Vec& v) {
    for (double x : v) add(x);
  }
  bool valid() const { return lo <= hi; }
  // Widened by `fraction` of its width on each side; a single value gets a unit-scale width.
  Range padded(double fraction) const {
    double width = hi - lo;
    if (width <= 0) width = std::max(std::abs(lo), 1.0) * 0.2;
    return {lo - fraction * width, hi + fraction * width};
  }
};

void pen(PLINT colour, double width, PLINT style = solid) {
  plcol0(colour);
  plwidth(width);
  pllsty(style);
}

// A polyline, broken where a coordinate is not finite.
void draw_line(const Vec& x, const Vec& y) {
  Vec xs, ys;
  auto flush = [&] {
    if (xs.size() >= 2) plline(static_cast<PLINT>(xs.size()), xs.data(), ys.data());
    xs.clear();
    ys.clear();
  };
  for (std::size_t i = 0; i < x.size() && i < y.size(); ++i) {
    if (std::isfinite(x[i]) && std::isfinite(y[i])) {
      xs.push_back(x[i]);
      ys.push_back(y[i]);
    } else {
      flush();
    }
  }
  flush();
}

void fill_polygon(const Vec& x, const Vec& y) {
  if (x.size() >= 3) plfill(static_cast<PLINT>(x.size()), x.data(), y.data());
}

// Tick labels without PLplot's separate "(x10^n)" factor, which collides with titles:
// "%g" text, 0 for rounding noise, a x10^n form for very large or small values; on a
// log10 axis "10^k" (plain numbers for |k| <= 2), only every `log_step`-th decade.
struct TickFormat {
  double span[2] = {1, 1};    // x and y window widths
  bool log[2] = {false, false};
  int log_step[2] = {1, 1};
};

void tick_label(PLINT axis, PLFLT value, char* label, PLINT length, PLPointer data) {
  const auto* format = static_cast<const TickFormat*>(data);
  const int a = axis == PL_X_AXIS ? 0 : 1;
  const auto size = static_cast<std::size_t>(length);
  if (format->log[a]) {
    const long k = std::lround(value);
    if (std::abs(value - static_cast<double>(k)) > 1e-6 || k % format->log_step[a] != 0)
      std::snprintf(label, size, "%s", "");
    else if (std::abs(k) <= 2)
      std::snprintf(label, size, "%g", std::pow(10.0, static_cast<double>(k)));
    else
      std::snprintf(label, size, "10#u%ld#d", k);
    return;
  }
  const double magnitude = std::abs(value);
  if (magnitude < 1e-9 * format->span[a]) {
    std::snprintf(label, size, "0");
  } else if (magnitude >= 1e5 || magnitude < 1e-3) {
    const int e = static_cast<int>(std::floor(std::log10(magnitude)));
    const double mantissa = value / std::pow(10.0, e);
    if (std::abs(std::abs(mantissa) - 1) < 1e-9)
      std::snprintf(label, size, "%s10#u%d#d", mantissa < 0 ? "-" : "", e);
    else
      std::snprintf(label, size, "%.3g×10#u%d#d", mantissa, e);
  } else {
    std::snprintf(label, size, "%.6g", value);
  }
}

// One plbox call with the tick labels above; log axes carry "l" in their options.
void box(const std::string& xopt, const std::string& yopt, double x_span, double y_span,
         int log_step_y = 1) {
  TickFormat format;
  format.span[0] = x_span;
  format.span[1] = y_span;
  format.log[0] = xopt.find('l') != std::string::npos;
  format.log[1] = yopt.find('l') != std::string::npos;
  format.log_step[1] = log_step_y;
  plslabelfunc(tick_label, &format);
  plbox((xopt + "o").c_str(), 0, 0, (yopt + "o").c_str(), 0, 0);
  plslabelfunc(nullptr, nullptr);
}

// Window and frame of one panel: light grid, then the box with ticks (numbers where asked).
struct Panel {
  std::array<double, 4> viewport;  // normalised page coordinates x0, x1, y0, y1
  double x_lo, x_hi, y_lo, y_hi;   // world coordinates (log10 values on a log axis)
  bool x_numbers = true, y_numbers = true;
  bool log_x = false, log_y = false;
  bool right_axis_free = false;    // leave the right edge for a second y axis
  int log_step_y = 1;              // label every n-th decade of a log y axis
};

void draw_frame(const Panel& p) {
  plvpor(p.viewport[0], p.viewport[1], p.viewport[2], p.viewport[3]);
  plwind(p.x_lo, p.x_hi, p.y_lo, p.y_hi);
  const std::string lx = p.log_x ? "l" : "", ly = p.log_y ? "l" : "";
  pen(grid_grey, 1.0);
  box("g" + lx, "g" + ly, p.x_hi - p.x_lo, p.y_hi - p.y_lo);
  std::string xopt = "bcst" + lx + (p.x_numbers ? "n" : "");
  std::string yopt = (p.right_axis_free ? "bstv" : "bcstv") + ly + (p.y_numbers ? "n" : "");
  pen(ink, 1.5);
  box(xopt, yopt, p.x_hi - p.x_lo, p.y_hi - p.y_lo, p.log_step_y);
}

void label_bottom(const std::string& text) { plmtex("b", 2.8, 0.5, 0.5, text.c_str()); }
void label_left(const std::string& text) { plmtex("l", 5.0, 0.5, 0.5, text.c_str()); }
void label_right(const std::string& text) { plmtex("r", 5.4, 0.5, 0.5, text.c_str()); }
void label_top(const std::string& text) { plmtex("t", 0.6, 0.5, 0.5, text.c_str()); }

void figure_title(const std::string& title) {
  if (title.empty()) return;
  plvpor(0, 1, 0, 1);
  plwind(0, 1, 0, 1);
  pen(ink, 1);
  plschr(0, 1.45);
  plptex(0.5, 0.955, 1, 0, 0.5, title.c_str());
  plschr(0, text_scale);
}

struct LegendEntry {
  std::string text;
  PLINT kind = PL_LEGEND_LINE;  // PL_LEGEND_LINE, PL_LEGEND_SYMBOL, PL_LEGEND_COLOR_BOX, or-ed
  PLINT colour = ink;
  PLINT line_style = solid;
  double line_width = 2.0;
  std::string symbol;           // for PL_LEGEND_SYMBOL
  PLINT fill_colour = -1;       // for PL_LEGEND_COLOR_BOX; -1: colour
};

LegendEntry line_entry(std::string text, PLINT colour, PLINT style, double width) {
  return {std::move(text), PL_LEGEND_LINE, colour, style, width, "", -1};
}

// Height of a legend row in normalised page units (measured on the 800 px page at
// text_scale; used to lay panels out below the legend).
constexpr double legend_row_height = 0.045;

// Legend above the viewport (x0, x1, y0, y1) with its lower edge at page height `bottom`,
// entries in `rows` rows, filled row by row. The legend sits outside the data on purpose.
void draw_legend_above(const std::vector<LegendEntry>& entries, std::array<double, 4> viewport,
                       double bottom, int rows) {
  if (entries.empty()) return;
  const auto n = static_cast<PLINT>(entries.size());
  const PLINT columns = (n + rows - 1) / rows;
  std::vector<PLINT> opts, text_colours, box_colours, box_patterns, line_colours, line_styles,
      symbol_colours, symbol_numbers;
  std::vector<PLFLT> box_scales, box_widths, line_widths, symbol_scales;
  std::vector<const char*> texts, symbols;
  for (const auto& e : entries) {
    opts.push_back(e.kind);
    text_colours.push_back(ink);
    box_colours.push_back(e.fill_colour >= 0 ? e.fill_colour : e.colour);
    box_patterns.push_back(0);
    box_scales.push_back(0.9);
    box_widths.push_back(1.0);
    line_colours.push_back(e.colour);
    line_styles.push_back(e.line_style);
    line_widths.push_back(e.line_width);
    symbol_colours.push_back(e.colour);
    symbol_scales.push_back(0.9);
    symbol_numbers.push_back(1);
    texts.push_back(e.text.c_str());
    symbols.push_back(e.symbol.c_str());
  }
  plvpor(viewport[0], viewport[1], viewport[2], viewport[3]);
  plwind(0, 1, 0, 1);
  const double offset = (bottom - viewport[3]) / (viewport[3] - viewport[2]);
  PLFLT width = 0, height = 0;
  pllegend(&width, &height, PL_LEGEND_BACKGROUND | PL_LEGEND_ROW_MAJOR,
           PL_POSITION_TOP | PL_POSITION_OUTSIDE, 0, offset, 0.06, white, ink, solid,
           static_cast<PLINT>(rows), columns, n, opts.data(), 0.8, 0.92, 1.9, 0.0,
           text_colours.data(), texts.data(), box_colours.data(), box_patterns.data(),
           box_scales.data(), box_widths.data(), line_colours.data(), line_styles.data(),
           line_widths.data(), symbol_colours.data(), symbol_scales.data(),
           symbol_numbers.data(), symbols.data());
}

std::string number(double v) {
  char buffer[32];
  std::snprintf(buffer, sizeof buffer, "%.4g", v);
  return buffer;
}

void check_same_size(const std::string& figure, const std::string& what, const Vec& a,
                     const Vec& b) {
  if (a.size() != b.size())
    bad_data(figure, what + ": sizes differ (" + std::to_string(a.size()) + " and " +
                         std::to_string(b.size()) + ")");
}

// ---- (a) levels ----------------------------------------------------------------------

// Intervals of x where V < E, ends found by linear interpolation between grid points.
std::vector<std::pair<double, double>> allowed_intervals(const Vec& x, const Vec& v, double e) {
  std::vector<std::pair<double, double>> out;
  bool inside = false;
  double start = 0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    const bool below = v[i] < e;
    if (below && !inside) {
      start = (i == 0) ? x[0] : x[i - 1] + (e - v[i - 1]) / (v[i] - v[i - 1]) * (x[i] - x[i - 1]);
      inside = true;
    } else if (!below && inside) {
      out.emplace_back(start,
                       x[i - 1] + (e - v[i - 1]) / (v[i] - v[i - 1]) * (x[i] - x[i - 1]));
      inside = false;
    }
  }
  if (inside) out.emplace_back(start, x.back());
  return out;
}

// Height (energy units) a scaled density of level n reaches above its line.
double density_peak(const LevelsPanel& p, std::size_t n, double fraction) {
  double gap = 0;
  if (n + 1 < p.energies.size()) gap = p.energies[n + 1] - p.energies[n];
  else if (n > 0) gap = p.energies[n] - p.energies[n - 1];
  if (!(gap > 0)) {
    Range v;
    v.add(p.potential);
    gap = 0.1 * (v.hi - p.energies[n]);
  }
  return fraction * gap;
}

void validate_levels(const LevelsFigure& f) {
  const std::string name = "plot_levels";
  if (f.panels.empty() || f.panels.size() > 2) bad_data(name, "needs one or two panels");
  if (!(f.density_height > 0 && f.density_height <= 1))
    bad_data(name, "density_height must be in (0, 1], found " + number(f.density_height));
  for (const auto& p : f.panels) {
    const std::string where = "panel '" + p.title + "'";
    if (p.x.size() < 2) bad_data(name, where + ": needs at least two positions");
    check_same_size(name, where + " x and potential", p.x, p.potential);
    for (std::size_t i = 0; i < p.x.size(); ++i)
      if (!std::isfinite(p.x[i]) || !std::isfinite(p.potential[i]))
        bad_data(name, where + ": x and V(x) must be finite (index " + std::to_string(i) + ")");
    if (!std::is_sorted(p.x.begin(), p.x.end())) bad_data(name, where + ": x must be ascending");
    if (p.energies.empty()) bad_data(name, where + ": no energies");
    if (p.densities.size() > p.energies.size())
      bad_data(name, where + ": more densities than energies");
    for (const auto& d : p.densities) check_same_size(name, where + " x and density", p.x, d);
  }
}

// Trims a scaled density to where it rises above 0.1% of its peak, so that its tails do not
// run across the whole panel as a second baseline.
void draw_density_on_level(const Vec& x, const Vec& d, double energy, double height) {
  double peak = 0;
  for (double v : d)
    if (std::isfinite(v)) peak = std::max(peak, std::abs(v));
  if (!(peak > 0)) return;
  std::size_t first = d.size(), last = 0;
  for (std::size_t i = 0; i < d.size(); ++i)
    if (std::isfinite(d[i]) && std::abs(d[i]) > 1e-3 * peak) {
      first = std::min(first, i);
      last = i;
    }
  Vec cx, cy;
  for (std::size_t i = first; i <= last && i < d.size(); ++i)
    if (std::isfinite(d[i])) {
      cx.push_back(x[i]);
      cy.push_back(energy + height / peak * std::abs(d[i]));
    }
  if (cx.size() < 2) return;
  Vec fx = cx, fy = cy;
  fx.push_back(cx.back());
  fy.push_back(energy);
  fx.push_back(cx.front());
  fy.push_back(energy);
  pen(blue_fill, 1);
  fill_polygon(fx, fy);
  pen(blue, 1.8);
  draw_line(cx, cy);
}

void draw_levels_panel(const LevelsPanel& p, const LevelsFigure& f, const Panel& frame) {
  draw_frame(frame);
  label_bottom(f.x_label);
  if (frame.y_numbers) label_left(f.energy_label);
  if (!p.title.empty()) label_top(p.title);
  for (std::size_t n = 0; n < p.densities.size(); ++n)
    draw_density_on_level(p.x, p.densities[n], p.energies[n], density_peak(p, n, f.density_height));
  pen(orange, 2.0);
  for (double e : p.energies)
    for (auto [a, b] : allowed_intervals(p.x, p.potential, e)) pljoin(a, e, b, e);
  pen(ink, 2.6);
  draw_line(p.x, p.potential);
}

std::vector<fs::path> draw_levels(const fs::path& stem, const LevelsFigure& f) {
  validate_levels(f);
  // Energy range shared by the panels; x range per panel.
  Range energy;
  double top = -std::numeric_limits<double>::infinity();
  std::vector<Range> x_ranges;
  for (const auto& p : f.panels) {
    const double e_max = *std::max_element(p.energies.begin(), p.energies.end());
    double reach = e_max;
    for (std::size_t n = 0; n < p.densities.size(); ++n)
      reach = std::max(reach, p.energies[n] + density_peak(p, n, f.density_height));
    top = std::max(top, reach);
    Range allowed;
    for (auto [a, b] : allowed_intervals(p.x, p.potential, e_max)) {
      allowed.add(a);
      allowed.add(b);
    }
    if (!allowed.valid()) allowed = {p.x.front(), p.x.back()};
    Range xr = allowed.padded(0.3);
    xr.lo = std::max(xr.lo, p.x.front());
    xr.hi = std::min(xr.hi, p.x.back());
    if (f.x_min) xr.lo = *f.x_min;
    if (f.x_max) xr.hi = *f.x_max;
    if (!(xr.lo < xr.hi)) bad_data("plot_levels", "x range is empty");
    x_ranges.push_back(xr);
    for (std::size_t i = 0; i < p.x.size(); ++i)
      if (p.x[i] >= xr.lo && p.x[i] <= xr.hi) energy.add(p.potential[i]);
    energy.add(p.energies);
  }
  Range er{energy.lo, top};
  const double span = (er.hi > er.lo) ? er.hi - er.lo : 1.0;
  er.hi += 0.06 * span;
  er.lo -= 0.03 * span;
  if (f.energy_min) er.lo = *f.energy_min;
  if (f.energy_max) er.hi = *f.energy_max;
  if (!(er.lo < er.hi)) bad_data("plot_levels", "energy range is empty");

  const bool panel_titles = std::any_of(f.panels.begin(), f.panels.end(),
                                        [](const LevelsPanel& p) { return !p.title.empty(); });
  const double legend_bottom = (f.title.empty() ? 0.93 : 0.89) - legend_row_height;
  const double top_edge = legend_bottom - (panel_titles ? 0.06 : 0.015);
  std::vector<LegendEntry> legend = {
      line_entry("potential V(x)", ink, solid, 2.6),
      line_entry("levels E#dn#u (where V < E#dn#u)", orange, solid, 2.0)};
  if (std::any_of(f.panels.begin(), f.panels.end(),
                  [](const LevelsPanel& p) { return !p.densities.empty(); }))
    legend.push_back({"|ψ#dn#u(x)|#u2#d, scaled, on its level",
                      PL_LEGEND_LINE | PL_LEGEND_COLOR_BOX, blue, solid, 1.8, "", blue_fill});

  std::vector<Panel> frames;
  auto frame = [&](std::size_t i, double x0, double x1, bool y_numbers) {
    Panel p{{x0, x1, 0.11, top_edge}, x_ranges[i].lo, x_ranges[i].hi, er.lo, er.hi};
    p.y_numbers = y_numbers;
    return p;
  };
  if (f.panels.size() == 1) frames = {frame(0, 0.11, 0.97, true)};
  else frames = {frame(0, 0.11, 0.535, true), frame(1, 0.55, 0.975, false)};

  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    for (std::size_t i = 0; i < f.panels.size(); ++i) draw_levels_panel(f.panels[i], f, frames[i]);
    draw_legend_above(legend,
                      {frames.front().viewport[0], frames.back().viewport[1], 0.11, top_edge},
                      legend_bottom, 1);
  });
}

// ---- (b) work distribution -----------------------------------------------------------

void validate_series(const std::string& name, const WorkSeries& s) {
  check_same_size(name, "'" + s.label + "' work and probability", s.work, s.probability);
  check_same_size(name, "'" + s.label + "' density grid and density", s.density_work, s.density);
  for (std::size_t i = 0; i < s.work.size(); ++i)
    if (!std::isfinite(s.work[i]) || !(s.probability[i] >= 0))
      bad_data(name, "'" + s.label + "': line " + std::to_string(i) +
                         " needs finite W and P >= 0");
}

// Vertical stems from the panel floor to P (or log10 P), with a marker on top.
void draw_stems(const WorkSeries& s, bool log, double floor, double offset, PLINT colour,
                const char* marker) {
  Vec tx, ty;
  pen(colour, 2.2);
  for (std::size_t i = 0; i < s.work.size(); ++i) {
    const double y = log ? (s.probability[i] > 0 ? std::log10(s.probability[i]) : -INFINITY)
                         : s.probability[i];
    if (!(y > floor)) continue;
    const double x = s.work[i] + offset;
    pljoin(x, floor, x, y);
    tx.push_back(x);
    ty.push_back(y);
  }
  pen(colour, 1);
  plschr(0, 0.8);
  if (!tx.empty()) plstring(static_cast<PLINT>(tx.size()), tx.data(), ty.data(), marker);
  plschr(0, text_scale);
}

std::vector<fs::path> draw_work(const fs::path& stem, const WorkFigure& f) {
  const std::string name = "plot_work";
  validate_series(name, f.result);
  if (f.reference) validate_series(name, *f.reference);
  if (f.result.work.empty() && f.result.density.empty()) bad_data(name, "no work values");
  if (!(f.log_decades > 0)) bad_data(name, "log_decades must be > 0");

  std::vector<const WorkSeries*> series = {&f.result};
  if (f.reference) series.push_back(&*f.reference);
  Range wr, dr;
  double p_max = 0;
  for (const auto* s : series) {
    wr.add(s->work);
    wr.add(s->density_work);
    dr.add(s->density);
    for (double p : s->probability) p_max = std::max(p_max, p);
  }
  if (f.mean_work) wr.add(*f.mean_work);
  if (f.free_energy_change) wr.add(*f.free_energy_change);
  if (!wr.valid()) bad_data(name, "no finite work values");
  wr = wr.padded(0.04);
  const bool has_density = dr.valid() && dr.hi > 0;
  const double offset = f.reference ? 0.004 * (wr.hi - wr.lo) : 0;
  const double headroom = 1.15;  // above the tallest stem: room for the marker labels
  const double p_top = (p_max > 0 ? p_max : 1.0) * headroom;
  const double d_top = (has_density ? dr.hi : 1.0) * headroom;
  const double log_top = std::log10(p_max > 0 ? p_max : 1.0) + 0.5;
  const double log_floor = log_top - 0.5 - f.log_decades;
  const int log_step = static_cast<int>(std::max(1.0, std::ceil(f.log_decades / 4)));

  // Legend, column by column: each series (lines above, density below), then the markers.
  std::vector<LegendEntry> by_column;
  for (std::size_t k = 0; k < series.size(); ++k) {
    const WorkSeries& s = *series[k];
    const PLINT colour = k == 0 ? blue : orange;
    by_column.push_back({(s.label.empty() ? std::string("lines") : s.label) + ": P#di#u",
                         PL_LEGEND_LINE | PL_LEGEND_SYMBOL, colour, solid, 2.2,
                         k == 0 ? "●" : "○", -1});
    by_column.push_back(has_density && !s.density.empty()
                            ? line_entry("broadened (right axis)", colour,
                                         k == 0 ? solid : dashed, 2.2)
                            : LegendEntry{"", PL_LEGEND_NONE, ink, solid, 1, "", -1});
  }
  if (f.mean_work)
    by_column.push_back(line_entry("mean work <W> = " + number(*f.mean_work), green, dashed, 2.0));
  if (f.free_energy_change)
    by_column.push_back(line_entry("free-energy change #gDF = " + number(*f.free_energy_change),
                                   purple, dotted, 2.0));
  const int rows = 2;
  const std::size_t columns = (by_column.size() + 1) / 2;
  std::vector<LegendEntry> legend;  // row-major order for pllegend
  for (std::size_t r = 0; r < 2; ++r)
    for (std::size_t c = 0; c < columns; ++c)
      legend.push_back(2 * c + r < by_column.size()
                           ? by_column[2 * c + r]
                           : LegendEntry{"", PL_LEGEND_NONE, ink, solid, 1, "", -1});

  const double legend_bottom = (f.title.empty() ? 0.93 : 0.89) - rows * legend_row_height;
  const double top_edge = legend_bottom - 0.02;
  const double left = 0.10, right = has_density ? 0.89 : 0.97;
  std::vector<Panel> panels;
  auto linear = [&](double y0, bool x_numbers) {
    Panel p{{left, right, y0, top_edge}, wr.lo, wr.hi, 0, p_top};
    p.x_numbers = x_numbers;
    p.right_axis_free = has_density;
    return p;
  };
  auto logarithmic = [&](double y1) {
    Panel p{{left, right, 0.11, y1}, wr.lo, wr.hi, log_floor, log_top};
    p.log_y = true;
    p.log_step_y = log_step;
    return p;
  };
  switch (f.probability_axis) {
    case ProbabilityAxis::linear_and_log: panels = {linear(0.42, false), logarithmic(0.39)}; break;
    case ProbabilityAxis::linear: panels = {linear(0.11, true)}; break;
    case ProbabilityAxis::log: panels = {logarithmic(top_edge)}; break;
  }

  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    for (const auto& panel : panels) {
      draw_frame(panel);
      if (panel.x_numbers) label_bottom(f.work_label);
      label_left(panel.log_y ? "P (log scale)" : "probability P");

      // Markers first, so that stems are drawn over them; <W> >= Delta F for a thermal
      // start (common practice), so Delta F is labelled left of its line and <W> right.
      const bool free_energy_left =
          !(f.mean_work && f.free_energy_change) || *f.free_energy_change <= *f.mean_work;
      auto marker = [&](double w, const char* text, PLINT colour, PLINT style, bool left_side) {
        pen(colour, 2.0, style);
        pljoin(w, panel.y_lo, w, panel.y_hi);
        if (panel.log_y && panels.size() > 1) return;
        const double dx = 0.006 * (wr.hi - wr.lo) * (left_side ? -1 : 1);
        pen(colour, 1);
        plptex(w + dx, panel.y_lo + 0.93 * (panel.y_hi - panel.y_lo), 1, 0,
               left_side ? 1.0 : 0.0, text);
      };
      if (f.free_energy_change)
        marker(*f.free_energy_change, "#gDF", purple, dotted, free_energy_left);
      if (f.mean_work) marker(*f.mean_work, "<W>", green, dashed, !free_energy_left);
      if (f.reference) draw_stems(*f.reference, panel.log_y, panel.y_lo, offset, orange, "○");
      draw_stems(f.result, panel.log_y, panel.y_lo, 0, blue, "●");

      if (has_density && !panel.log_y) {
        plwind(wr.lo, wr.hi, 0, d_top);
        pen(ink, 1.5);
        box("", "cmstv", wr.hi - wr.lo, d_top);
        label_right(f.density_label.empty() ? "density (right axis)" : f.density_label);
        if (f.reference && !f.reference->density.empty()) {
          pen(orange, 2.2, dashed);
          draw_line(f.reference->density_work, f.reference->density);
        }
        pen(blue, 2.2);
        draw_line(f.result.density_work, f.result.density);
      }
    }
    draw_legend_above(legend, {left, right, 0.11, top_edge}, legend_bottom, rows);
  });
}

// ---- (c) sweep -----------------------------------------------------------------------

// Linear interpolation of an ascending curve; NaN outside it.
double interpolate(const SweepCurve& c, double x) {
  if (c.x.empty() || x < c.x.front() || x > c.x.back()) return std::nan("");
  const auto it = std::lower_bound(c.x.begin(), c.x.end(), x);
  const auto i = static_cast<std::size_t>(it - c.x.begin());
  if (i == 0) return c.y[0];
  const double t = (x - c.x[i - 1]) / (c.x[i] - c.x[i - 1]);
  return c.y[i - 1] + t * (c.y[i] - c.y[i - 1]);
}

constexpr std::array<PLINT, 3> point_colours = {blue, green, purple};
constexpr std::array<PLINT, 3> point_fills = {blue_fill, green_fill, purple_fill};
constexpr std::array<PLINT, 3> curve_colours = {orange, red, grey};

// Points as drawn: x (log10 on a log axis), y, and y -+ spread.
struct DrawnPoints {
  Vec x, y, lo, hi;
  bool spread = false;
};

// Markers with +-spread as error bars or as a band; colour k of the point colours.
void draw_points(const DrawnPoints& p, bool band, std::size_t k) {
  if (p.x.empty()) return;
  if (p.spread && band) {
    Vec bx = p.x, by = p.hi;
    for (std::size_t i = p.x.size(); i-- > 0;) {
      bx.push_back(p.x[i]);
      by.push_back(p.lo[i]);
    }
    pen(point_fills[k % 3], 1);
    fill_polygon(bx, by);
  } else if (p.spread) {
    pen(point_colours[k % 3], 1.6);
    plerry(static_cast<PLINT>(p.x.size()), p.x.data(), p.lo.data(), p.hi.data());
  }
  pen(point_colours[k % 3], 1);
  plschr(0, 0.75);
  plstring(static_cast<PLINT>(p.x.size()), p.x.data(), p.y.data(), "●");
  plschr(0, text_scale);
}

std::vector<fs::path> draw_sweep(const fs::path& stem, const SweepFigure& f) {
  const std::string name = "plot_sweep";
  if (f.points.empty() && f.curves.empty()) bad_data(name, "nothing to draw");
  for (const auto& p : f.points) {
    check_same_size(name, "'" + p.label + "' x and y", p.x, p.y);
    if (!p.spread.empty()) check_same_size(name, "'" + p.label + "' y and spread", p.y, p.spread);
  }
  for (const auto& c : f.curves) {
    check_same_size(name, "curve '" + c.label + "' x and y", c.x, c.y);
    if (!std::is_sorted(c.x.begin(), c.x.end()))
      bad_data(name, "curve '" + c.label + "': x must be ascending");
  }
  if (f.departure != Departure::none && f.curves.empty())
    bad_data(name, "a departure panel needs an analytic curve");
  const auto shown_x = [&](double x) { return f.log_x ? (x > 0 ? std::log10(x) : NAN) : x; };
  auto map_x = [&](const Vec& xs) {
    Vec out;
    for (double x : xs) out.push_back(shown_x(x));
    return out;
  };

  const bool relative = f.departure == Departure::relative;
  std::vector<DrawnPoints> drawn, departures;
  Range xr, yr, dr;
  dr.add(0.0);
  for (const auto& p : f.points) {
    DrawnPoints d{map_x(p.x), p.y, {}, {}, !p.spread.empty()};
    DrawnPoints e{{}, {}, {}, {}, !p.spread.empty()};
    for (std::size_t i = 0; i < p.y.size(); ++i) {
      const double s = p.spread.empty() ? 0 : std::abs(p.spread[i]);
      d.lo.push_back(p.y[i] - s);
      d.hi.push_back(p.y[i] + s);
      if (f.departure == Departure::none) continue;
      const double c = interpolate(f.curves[0], p.x[i]);
      double dev = p.y[i] - c, err = s;
      if (relative) {
        if (c == 0) continue;
        dev /= c;
        err /= std::abs(c);
      }
      if (!std::isfinite(dev) || !std::isfinite(d.x[i])) continue;
      e.x.push_back(d.x[i]);
      e.y.push_back(dev);
      e.lo.push_back(dev - err);
      e.hi.push_back(dev + err);
    }
    xr.add(d.x);
    yr.add(d.lo);
    yr.add(d.hi);
    dr.add(e.lo);
    dr.add(e.hi);
    drawn.push_back(d);
    departures.push_back(e);
  }
  for (const auto& c : f.curves) {
    xr.add(map_x(c.x));
    yr.add(c.y);
  }
  if (!xr.valid() || !yr.valid()) bad_data(name, "no finite values");
  xr = xr.padded(0.03);
  yr = yr.padded(0.06);
  dr = dr.padded(0.1);

  std::vector<LegendEntry> legend;
  for (std::size_t k = 0; k < f.points.size(); ++k) {
    LegendEntry e{f.points[k].label, PL_LEGEND_SYMBOL, point_colours[k % 3], solid, 1.6, "●", -1};
    if (drawn[k].spread && f.spread_as_band) {
      e.kind |= PL_LEGEND_COLOR_BOX;
      e.fill_colour = point_fills[k % 3];
    }
    legend.push_back(e);
  }
  for (std::size_t k = 0; k < f.curves.size(); ++k)
    legend.push_back(
        line_entry(f.curves[k].label, curve_colours[k % 3], k == 0 ? solid : dashed, 2.4));
  const int rows = legend.size() > 2 ? 2 : 1;

  const bool two_panels = f.departure != Departure::none;
  const double legend_bottom = (f.title.empty() ? 0.93 : 0.89) - rows * legend_row_height;
  const double top_edge = legend_bottom - 0.02;
  Panel main{{0.11, 0.97, two_panels ? 0.44 : 0.11, top_edge}, xr.lo, xr.hi, yr.lo, yr.hi};
  main.x_numbers = !two_panels;
  main.log_x = f.log_x;
  Panel lower{{0.11, 0.97, 0.11, 0.41}, xr.lo, xr.hi, dr.lo, dr.hi};
  lower.log_x = f.log_x;

  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    draw_frame(main);
    if (!two_panels) label_bottom(f.x_label);
    label_left(f.y_label);
    for (std::size_t k = 0; k < drawn.size(); ++k) draw_points(drawn[k], f.spread_as_band, k);
    for (std::size_t k = 0; k < f.curves.size(); ++k) {
      pen(curve_colours[k % 3], 2.4, k == 0 ? solid : dashed);
      draw_line(map_x(f.curves[k].x), f.curves[k].y);
    }
    if (two_panels) {
      draw_frame(lower);
      label_bottom(f.x_label);
      label_left(!f.departure_label.empty() ? f.departure_label
                 : relative                 ? "relative departure"
                                            : "departure");
      pen(curve_colours[0], 1.8, dashed);
      pljoin(xr.lo, 0, xr.hi, 0);
      for (std::size_t k = 0; k < departures.size(); ++k) draw_points(departures[k], false, k);
      pen(ink, 1);
      plschr(0, 0.95);
      plmtex("t", -1.4, 0.012, 0.0,
             ((relative ? "(y - c) / c,  c: " : "y - c,  c: ") + f.curves[0].label).c_str());
      plschr(0, text_scale);
    }
    draw_legend_above(legend, main.viewport, legend_bottom, rows);
  });
}

}  // namespace

std::vector<fs::path> plot_levels(const fs::path& stem, const LevelsFigure& figure) {
  return draw_levels(stem, figure);
}

std::vector<fs::path> plot_spectrum(const fs::path& stem, const LevelsFigure& figure) {
  if (figure.panels.size() != 1) bad_data("plot_spectrum", "needs exactly one panel");
  return draw_levels(stem, figure);
}

std::vector<fs::path> plot_work(const fs::path& stem, const WorkFigure& figure) {
  return draw_work(stem, figure);
}

std::vector<fs::path> plot_sweep(const fs::path& stem, const SweepFigure& figure) {
  return draw_sweep(stem, figure);
}

}  // namespace trapwork
