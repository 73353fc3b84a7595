// Figures with PLplot: see plot.hpp. Layout is in normalised page coordinates (plvpor),
// data in world coordinates (plwind); every figure runs in its own stream (plmkstrm ...
// plend1), with the error code captured through plsError instead of printed.
#include "solver/scenario/plot.hpp"

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
constexpr double text_scale = 1.0;  // base character size (plschr scale) of every figure
constexpr double char_px = 13.8;     // mean advance of one character at scale 1, px (measured)

// Colour map 0 of every figure (index: role). Index 0 is the background.
enum Colour : PLINT {
  white = 0, ink = 1, blue = 2, orange = 3, green = 4, red = 5, purple = 6, grey = 7,
  blue_fill = 8, orange_fill = 9, grid_grey = 10, green_fill = 11, purple_fill = 12, red_fill = 13,
};
constexpr int colour_count = 14;
constexpr std::array<PLINT, colour_count> colour_r = {255, 0, 31, 230, 44, 200, 120, 110, 31, 230, 225, 44, 120, 200};
constexpr std::array<PLINT, colour_count> colour_g = {255, 0, 100, 120, 150, 30, 60, 110, 100, 120, 225, 150, 60, 30};
constexpr std::array<PLINT, colour_count> colour_b = {255, 0, 180, 20, 60, 40, 160, 110, 180, 20, 225, 60, 160, 40};
constexpr std::array<PLFLT, colour_count> colour_a = {1, 1, 1, 1, 1, 1, 1, 1, 0.25, 0.3, 1, 0.25, 0.25, 0.45};

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

// The points of a polyline that show at the page's resolution: Ramer-Douglas-Peucker
// simplification (common practice), dropping points within 0.2 pixel of the line through the
// kept ones, in the current window. A dashed or dotted line reaches the SVG file as one path
// per segment, so a density of 4001 points made work.svg 2 MB.
void simplify(Vec& x, Vec& y) {
  const std::size_t n = x.size();
  if (n < 3) return;
  PLFLT wx0, wx1, wy0, wy1, vx0, vx1, vy0, vy1;
  plgvpw(&wx0, &wx1, &wy0, &wy1);
  plgvpd(&vx0, &vx1, &vy0, &vy1);
  if (!(wx1 != wx0 && wy1 != wy0)) return;
  const double sx = (vx1 - vx0) * page_width_px / (wx1 - wx0), sy = (vy1 - vy0) * page_height_px / (wy1 - wy0);
  std::vector<char> keep(n, 0);
  keep.front() = keep.back() = 1;
  std::vector<std::pair<std::size_t, std::size_t>> spans{{0, n - 1}};
  while (!spans.empty()) {
    const auto [a, b] = spans.back();
    spans.pop_back();
    const double dx = (x[b] - x[a]) * sx, dy = (y[b] - y[a]) * sy, length = std::hypot(dx, dy);
    double far = 0;
    std::size_t at = a;
    for (std::size_t i = a + 1; i < b; ++i) {
      const double px = (x[i] - x[a]) * sx, py = (y[i] - y[a]) * sy;
      const double d = length > 0 ? std::abs(px * dy - py * dx) / length : std::hypot(px, py);
      if (d > far) far = d, at = i;
    }
    if (far > 0.2) {
      keep[at] = 1;
      spans.push_back({a, at});
      spans.push_back({at, b});
    }
  }
  std::size_t k = 0;
  for (std::size_t i = 0; i < n; ++i)
    if (keep[i]) x[k] = x[i], y[k] = y[i], ++k;
  x.resize(k);
  y.resize(k);
}

// A polyline, broken where a coordinate is not finite.
void draw_line(const Vec& x, const Vec& y) {
  Vec xs, ys;
  auto flush = [&] {
    simplify(xs, ys);
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

// A disc of radius radius_mm on the page, round whatever the axes' scales, centred at (x, y) in
// the current viewport and window: its outline as `sides` + 1 points (closed), in world units.
// Drawn as polygons, many markers cost far less than as text glyphs (plstring lays out each
// glyph through the font renderer: 12 % of a whole `trapwork work` call's CPU time for the
// 1300 lines of a quartic trap's work figure, measured).
struct Disc {
  static constexpr int max_sides = 24;  // the maps' large markers
  int sides = max_sides;  // fewer for small dots: smaller SVG files, no visible difference
  double rx = 0, ry = 0;
  explicit Disc(double radius_mm) {
    PLFLT vx0, vx1, vy0, vy1, wx0, wx1, wy0, wy1, xmin_mm, xmax_mm, ymin_mm, ymax_mm;
    plgvpd(&vx0, &vx1, &vy0, &vy1);                   // the viewport in page fractions
    plgvpw(&wx0, &wx1, &wy0, &wy1);                   // its world window
    plgspa(&xmin_mm, &xmax_mm, &ymin_mm, &ymax_mm);  // the subpage in mm: its aspect
    rx = radius_mm / ((vx1 - vx0) * (xmax_mm - xmin_mm)) * (wx1 - wx0);
    ry = radius_mm / ((vy1 - vy0) * (ymax_mm - ymin_mm)) * (wy1 - wy0);
    if (radius_mm < 3) sides = radius_mm < 1 ? 8 : 16;
  }
  void outline(double x, double y, PLFLT* cx, PLFLT* cy) const {  // sides + 1 points
    for (int k = 0; k <= sides; ++k) {
      cx[k] = x + rx * std::cos(2 * M_PI * k / sides);
      cy[k] = y + ry * std::sin(2 * M_PI * k / sides);
    }
  }
  void fill(double x, double y) const {
    PLFLT cx[max_sides + 1], cy[max_sides + 1];
    outline(x, y, cx, cy);
    plfill(sides, cx, cy);
  }
};

// The markers of the work figure's stems, drawn as polygons (Disc) in the size of the legend's
// glyphs ●, ○ and ◆ at the same character scale.
enum class Marker { disc, ring, diamond };

void draw_markers(const Vec& x, const Vec& y, Marker marker, double scale) {
  PLFLT default_mm, height_mm;
  plgchr(&default_mm, &height_mm);
  const Disc disc(0.5 * scale * height_mm / text_scale);
  for (std::size_t i = 0; i < x.size(); ++i) {
    if (marker == Marker::diamond) {
      const double r = 1.15;  // the glyph's diamond reaches a little beyond the disc
      PLFLT cx[5] = {x[i] + r * disc.rx, x[i], x[i] - r * disc.rx, x[i], x[i] + r * disc.rx};
      PLFLT cy[5] = {y[i], y[i] + r * disc.ry, y[i], y[i] - r * disc.ry, y[i]};
      plfill(4, cx, cy);
    } else if (marker == Marker::ring) {
      PLFLT cx[Disc::max_sides + 1], cy[Disc::max_sides + 1];
      disc.outline(x[i], y[i], cx, cy);
      plline(disc.sides + 1, cx, cy);
    } else {
      disc.fill(x[i], y[i]);
    }
  }
}

// Width of PLplot text in characters: escapes "#u", "#d" take no room, "#gX" is one glyph,
// characters raised or lowered from the baseline count 0.6 (PLplot draws them smaller).
double visible_length(const std::string& text) {
  double n = 0;
  int level = 0;  // superscript / subscript depth
  for (std::size_t i = 0; i < text.size(); ++i) {
    const auto c = static_cast<unsigned char>(text[i]);
    const double w = level == 0 ? 1.0 : 0.6;
    if (c == '#' && i + 1 < text.size()) {
      const char e = text[i + 1];
      if (e == 'g') {
        i += 2;
        n += w;
        continue;
      }
      if (e == 'u') ++level;
      if (e == 'd') --level;
      ++i;
    } else if ((c & 0xC0) != 0x80) {
      n += w;  // count UTF-8 lead bytes only
    }
  }
  return n;
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
  } else if (magnitude >= 1e6 || magnitude < 1e-4) {
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
         int log_step_y = 1, double x_tick = 0, double y_tick = 0) {
  TickFormat format;
  format.span[0] = x_span;
  format.span[1] = y_span;
  format.log[0] = xopt.find('l') != std::string::npos;
  format.log[1] = yopt.find('l') != std::string::npos;
  format.log_step[1] = log_step_y;
  plslabelfunc(tick_label, &format);
  plbox((xopt + "o").c_str(), x_tick, 0, (yopt + "o").c_str(), y_tick, 0);
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
  bool grid_lines = true;          // false: none (a map, whose cells and markers they would cross)
};

// Tick spacing 1, 2 or 5 x 10^k for about `max_ticks` intervals over `span`:
// The step nearest (in ratio) to span / max_ticks, so that a short axis still gets at least
// two labelled ticks.
double nice_step(double span, int max_ticks) {
  const double raw = span / max_ticks;
  const double decade = std::pow(10.0, std::floor(std::log10(raw)));
  double best = decade;
  for (double m : {2.0, 5.0, 10.0})
    if (std::abs(std::log(m * decade / raw)) < std::abs(std::log(best / raw))) best = m * decade;
  return best;
}

// Room per tick label (px): wide enough for labels such as "-0.025" at text_scale.
constexpr double x_tick_room_px = 110, y_tick_room_px = 55;

// Distance (in character heights) from the axis to an axis label that clears the widest
// tick label of an axis from lo to hi with ticks every `step` (every `log_step`-th decade on
// a log axis). Tick digits are about 0.85 character heights wide (measured on these figures).
double label_distance(double lo, double hi, double step, bool log, int log_step) {
  TickFormat format;
  format.span[1] = hi - lo;
  format.log[1] = log;
  format.log_step[1] = log_step;
  if (log) step = 1;
  double widest = 1;
  for (double v = std::ceil(lo / step) * step; v <= hi + 1e-9 * step; v += step) {
    char text[64];
    tick_label(PL_Y_AXIS, v, text, sizeof text, &format);
    widest = std::max(widest, visible_length(text));
  }
  return 2.0 + 0.85 * widest;
}

int tick_count(double fraction, double page_px, double room) {
  return std::max(3, static_cast<int>(fraction * page_px / room));
}

double y_tick_step(const Panel& p) {
  return p.log_y ? 0 : nice_step(p.y_hi - p.y_lo, tick_count(p.viewport[3] - p.viewport[2], page_height_px, y_tick_room_px));
}

// The panel's left edge (page fraction) moved right where its left axis label, beyond tick
// labels as wide as "12000", would leave the page: a character at text_scale is about 19 px
// high on the 1200 px page (measured on the rendered levels figure).
void make_room_for_left_label(Panel& p) {
  const double distance = label_distance(p.y_lo, p.y_hi, y_tick_step(p), p.log_y, p.log_step_y);
  p.viewport[0] = std::max(p.viewport[0], (distance + 1.0) * 19.0 * text_scale / page_width_px);
}

// Draws the panel's frame; returns the distance for its left axis label.
double draw_frame(const Panel& p) {
  plvpor(p.viewport[0], p.viewport[1], p.viewport[2], p.viewport[3]);
  plwind(p.x_lo, p.x_hi, p.y_lo, p.y_hi);
  const double x_tick = p.log_x ? 0
      : nice_step(p.x_hi - p.x_lo, tick_count(p.viewport[1] - p.viewport[0], page_width_px, x_tick_room_px));
  const double y_tick = y_tick_step(p);
  // Log axes over many decades get no minor ticks: they would merge into a black band.
  const auto minor = [](bool log, double span) {
    return log ? (span <= 6 ? "ls" : "l") : "s";
  };
  const std::string lx = minor(p.log_x, p.x_hi - p.x_lo), ly = minor(p.log_y, p.y_hi - p.y_lo);
  if (p.grid_lines) {
    pen(grid_grey, 1.0);
    box(p.log_x ? "gl" : "g", p.log_y ? "gl" : "g", p.x_hi - p.x_lo, p.y_hi - p.y_lo, 1, x_tick, y_tick);
  }
  std::string xopt = "bct" + lx + (p.x_numbers ? "n" : "");
  std::string yopt = (p.right_axis_free ? "btv" : "bctv") + ly + (p.y_numbers ? "n" : "");
  pen(ink, 1.5);
  box(xopt, yopt, p.x_hi - p.x_lo, p.y_hi - p.y_lo, p.log_step_y, x_tick, y_tick);
  return label_distance(p.y_lo, p.y_hi, y_tick, p.log_y, p.log_step_y);
}

// A second y axis on the right of panel p, from 0 to `top`; leaves that window set and
// returns the distance for its label.
double draw_right_axis(const Panel& p, double top) {
  plwind(p.x_lo, p.x_hi, 0, top);
  const double tick =
      nice_step(top, tick_count(p.viewport[3] - p.viewport[2], page_height_px, y_tick_room_px));
  pen(ink, 1.5);
  box("", "cmstv", p.x_hi - p.x_lo, top, 1, 0, tick);
  return label_distance(0, top, tick, false, 1);
}

// Character scale, at most `scale` and at least 0.7 of it, at which `text` fits `room_px`.
double fitting_scale(const std::string& text, double room_px, double scale) {
  const double needed = char_px * scale * visible_length(text);
  return needed <= room_px ? scale : std::max(0.7 * scale, scale * room_px / needed);
}

// Text beside the current viewport (plmtex side "b", "l", "r", "t"), `distance` in character
// heights at text_scale, shrunk where it is longer than that side of the viewport.
void side_text(const char* side, double distance, const std::string& text) {
  PLFLT x0, x1, y0, y1;
  plgvpd(&x0, &x1, &y0, &y1);
  const bool vertical = side[0] == 'l' || side[0] == 'r';
  const double room = vertical ? (y1 - y0) * page_height_px : (x1 - x0) * page_width_px;
  const double scale = fitting_scale(text, 0.98 * room, text_scale);
  plschr(0, scale);
  plmtex(side, distance * text_scale / scale, 0.5, 0.5, text.c_str());
  plschr(0, text_scale);
}

void label_bottom(const std::string& text) { side_text("b", 2.8, text); }
void label_left(const std::string& text, double distance) { side_text("l", distance, text); }
void label_right(const std::string& text, double distance) { side_text("r", distance, text); }
void label_top(const std::string& text) { side_text("t", 0.6, text); }

void figure_title(const std::string& title) {
  if (title.empty()) return;
  plvpor(0, 1, 0, 1);
  plwind(0, 1, 0, 1);
  pen(ink, 1);
  plschr(0, fitting_scale(title, 0.96 * page_width_px, 1.45));
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

// Height of a legend row in normalised page units, and the width of one character of legend
// text in px (both measured on the 1200 x 800 page, which pngcairo and svgcairo share).
constexpr double legend_row_height = 0.045;
constexpr double legend_text_scale = 0.92;
constexpr double legend_char_px = char_px * text_scale * legend_text_scale;

// Rows a legend needs (at least `min_rows`) so that its columns, all as wide as the widest
// entry, fit into a viewport `width` (normalised page units) wide.
int legend_rows(const std::vector<LegendEntry>& entries, double width, int min_rows) {
  double longest = 0;
  for (const auto& e : entries) longest = std::max(longest, visible_length(e.text));
  const double entry_px = 0.06 * width * page_width_px + 3 * legend_char_px +
                          legend_char_px * longest;
  const int n = static_cast<int>(entries.size());
  const int columns = std::clamp(static_cast<int>(width * page_width_px / entry_px), 1, std::max(n, 1));
  return std::max(min_rows, (n + columns - 1) / columns);
}

// Legend above the viewport (x0, x1, y0, y1) with its lower edge at page height `bottom`, in
// `rows` rows filled column by column. The legend sits outside the data on purpose.
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
  pllegend(&width, &height, PL_LEGEND_BACKGROUND, PL_POSITION_TOP | PL_POSITION_OUTSIDE, 0,
           offset, 0.06, white, ink, solid, static_cast<PLINT>(rows), columns, n, opts.data(),
           0.8, legend_text_scale, 1.9, 0.0, text_colours.data(), texts.data(),
           box_colours.data(), box_patterns.data(), box_scales.data(), box_widths.data(),
           line_colours.data(), line_styles.data(), line_widths.data(), symbol_colours.data(),
           symbol_scales.data(), symbol_numbers.data(), symbols.data());
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

// Height (energy units) a scaled density of level n reaches above its line: `fraction` of
// the gap to the next level that is not near-degenerate with it (closer than 10% of the mean
// spacing, as in a tunnelling doublet; the gap below for the highest level), but at most
// `fraction` of the mean spacing.
double density_peak(const LevelsPanel& p, std::size_t n, double fraction) {
  const auto& e = p.energies;
  const double mean = e.size() > 1 ? (e.back() - e.front()) / static_cast<double>(e.size() - 1) : 0;
  double gap = 0;
  for (std::size_t m = n + 1; m < e.size() && gap == 0; ++m)
    if (e[m] - e[n] > 0.1 * mean) gap = e[m] - e[n];
  for (std::size_t m = n; m-- > 0 && gap == 0;)
    if (e[n] - e[m] > 0.1 * mean) gap = e[n] - e[m];
  if (gap > 0) return fraction * std::min(gap, mean);
  Range v;  // a single level (or all degenerate): a tenth of the potential's range above it
  v.add(p.potential);
  return fraction * 0.1 * std::max(v.hi - e[n], v.hi - v.lo);
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
    for (double w : p.walls)
      if (!std::isfinite(w)) bad_data(name, where + ": wall positions must be finite");
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
  const double distance = draw_frame(frame);
  label_bottom(f.x_label);
  if (frame.y_numbers) label_left(f.energy_label, distance);
  if (!p.title.empty()) label_top(p.title);
  for (std::size_t n = 0; n < p.densities.size(); ++n)
    draw_density_on_level(p.x, p.densities[n], p.energies[n], density_peak(p, n, f.density_height));
  pen(orange, 2.0);
  for (double e : p.energies)
    for (auto [a, b] : allowed_intervals(p.x, p.potential, e)) pljoin(a, e, b, e);
  pen(ink, 2.6);
  draw_line(p.x, p.potential);
  pen(ink, 6.0);
  for (double w : p.walls) pljoin(w, frame.y_lo, w, frame.y_hi);
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
    if (!p.walls.empty()) {  // the walls inside the panel, with a margin beyond them
      Range walls;
      walls.add(p.walls);
      walls = walls.padded(0.04);
      xr.lo = std::min(xr.lo, walls.lo);
      xr.hi = std::max(xr.hi, walls.hi);
    }
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
  std::vector<LegendEntry> legend = {
      line_entry("potential V(x)", ink, solid, 2.6),
      line_entry("levels E#dn#u (where V < E#dn#u)", orange, solid, 2.0)};
  if (std::any_of(f.panels.begin(), f.panels.end(), [](const LevelsPanel& p) { return !p.walls.empty(); }))
    legend.push_back(line_entry("hard walls", ink, solid, 6.0));
  if (std::any_of(f.panels.begin(), f.panels.end(),
                  [](const LevelsPanel& p) { return !p.densities.empty(); }))
    legend.push_back({"|ψ#dn#u(x)|#u2#d (scaled)",
                      PL_LEGEND_LINE | PL_LEGEND_COLOR_BOX, blue, solid, 1.8, "", blue_fill});

  const int rows = legend_rows(legend, f.panels.size() == 1 ? 0.86 : 0.865, 1);
  const double legend_bottom = (f.title.empty() ? 0.93 : 0.89) - rows * legend_row_height;
  const double top_edge = legend_bottom - (panel_titles ? 0.06 : 0.015);
  std::vector<Panel> frames;
  auto frame = [&](std::size_t i, double x0, double x1, bool y_numbers) {
    Panel p{{x0, x1, 0.11, top_edge}, x_ranges[i].lo, x_ranges[i].hi, er.lo, er.hi};
    p.y_numbers = y_numbers;
    return p;
  };
  if (f.panels.size() == 1) frames = {frame(0, 0.11, 0.97, true)};
  else frames = {frame(0, 0.11, 0.535, true), frame(1, 0.55, 0.975, false)};
  make_room_for_left_label(frames.front());

  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    for (std::size_t i = 0; i < f.panels.size(); ++i) draw_levels_panel(f.panels[i], f, frames[i]);
    draw_legend_above(legend,
                      {frames.front().viewport[0], frames.back().viewport[1], 0.11, top_edge},
                      legend_bottom, rows);
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

// Vertical stems from the panel floor to P (or log10 P), with a marker on top. Without markers
// (marker_scale 0: too many lines for them) the stems are drawn light, each top a small dot.
void draw_stems(const WorkSeries& s, bool log, double floor, double offset, PLINT colour, Marker marker,
                double marker_scale, double stem_width) {
  Vec tx, ty;
  const bool crowded = !(marker_scale > 0);
  pen(crowded ? (colour == blue ? blue_fill : orange_fill) : colour, stem_width);
  for (std::size_t i = 0; i < s.work.size(); ++i) {
    const double y = log ? (s.probability[i] > 0 ? std::log10(s.probability[i]) : -INFINITY)
                         : s.probability[i];
    if (!(y > floor)) continue;
    const double x = s.work[i] + offset;
    pljoin(x, floor, x, y);
    tx.push_back(x);
    ty.push_back(y);
  }
  if (tx.empty()) return;
  pen(colour, 1.5);
  draw_markers(tx, ty, crowded ? Marker::disc : marker, crowded ? 0.1 : marker_scale);  // crowded: small dots
}

// +-1 standard error bars on a series' stems (red), in log10 P on a log panel, clipped at its
// floor.
// The drawn extent [a, b] of p -+ e in panel units (log10 on a log panel, cut at the floor);
// false where nothing is drawn (e not > 0, p at or below a log panel's floor).
bool error_extent(double p, double e, bool log, double floor, double& a, double& b) {
  if (!(e > 0)) return false;
  a = p - e, b = p + e;
  if (log) {
    if (!(std::log10(std::max(p, 1e-300)) > floor)) return false;
    a = a > 0 ? std::max(std::log10(a), floor) : floor;
    b = std::log10(b);
  } else {
    a = std::max(a, floor);
  }
  return true;
}

// Share of a panel's height (y_lo..y_hi, panel units) below which an error_as_band series draws
// no box: 6 % is 9 to 15 px on the work figure's panels, which a box twice as wide as the marker
// shows beside it; a shorter one would be a dash that only crowds the panel.
constexpr double band_visible_share = 0.06;

// Lines of an error_as_band series whose box is drawn on a panel spanning y_lo..y_hi.
std::size_t drawn_error_boxes(const WorkSeries& s, bool log, double y_lo, double y_hi) {
  std::size_t n = 0;
  for (std::size_t i = 0; i < s.error.size() && i < s.probability.size(); ++i) {
    double a = 0, b = 0;
    if (error_extent(s.probability[i], s.error[i], log, y_lo, a, b) && b - a >= band_visible_share * (y_hi - y_lo)) ++n;
  }
  return n;
}

// +-error of each line: red bars with caps, or for error_as_band the light boxes (drawn before
// the stems, so that the markers stand on them).
void draw_error_bars(const WorkSeries& s, bool log, double floor, double offset, double y_hi, double box_width) {
  if (s.error.empty()) return;
  Vec x, lo, hi;
  for (std::size_t i = 0; i < s.work.size(); ++i) {
    double a = 0, b = 0;
    if (!error_extent(s.probability[i], s.error[i], log, floor, a, b)) continue;
    if (s.error_as_band && b - a < band_visible_share * (y_hi - floor)) continue;
    x.push_back(s.work[i] + offset);
    lo.push_back(a);
    hi.push_back(b);
  }
  if (x.empty()) return;
  if (s.error_as_band) {  // a light box on the stem, no caps
    pen(red_fill, 1);
    for (std::size_t i = 0; i < x.size(); ++i)
      fill_polygon({x[i] - box_width / 2, x[i] + box_width / 2, x[i] + box_width / 2, x[i] - box_width / 2},
                   {lo[i], lo[i], hi[i], hi[i]});
    return;
  }
  pen(red, 1.6);
  plerry(static_cast<PLINT>(x.size()), x.data(), lo.data(), hi.data());
}

// Work range of the lines left after dropping, from each end, lines that together carry at most
// `tail` of the probability (all series together); invalid when there are no lines.
Range bulk_range(const std::vector<const WorkSeries*>& series, double tail) {
  std::vector<std::pair<double, double>> lines;
  double total = 0;
  for (const auto* s : series)
    for (std::size_t i = 0; i < s->work.size(); ++i) {
      lines.emplace_back(s->work[i], s->probability[i]);
      total += s->probability[i];
    }
  Range r;
  if (lines.empty() || !(total > 0)) return r;
  std::sort(lines.begin(), lines.end());
  std::size_t lo = 0, hi = lines.size() - 1;
  for (double dropped = lines[lo].second; dropped <= tail * total && lo < hi;) dropped += lines[++lo].second;
  for (double dropped = lines[hi].second; dropped <= tail * total && hi > lo;) dropped += lines[--hi].second;
  r.add(lines[lo].first);
  r.add(lines[hi].first);
  return r;
}

void validate_work(const WorkFigure& f) {
  const std::string name = "plot_work";
  validate_series(name, f.result);
  if (!f.result.error.empty() && f.result.error.size() != f.result.work.size())
    bad_data(name, "one standard deviation per line of the result");
  if (f.reference) validate_series(name, *f.reference);
  if (f.noisy) {
    validate_series(name, *f.noisy);
    if (!f.noisy->error.empty() && f.noisy->error.size() != f.noisy->work.size())
      bad_data(name, "one standard error per noisy line");
  }
  if (f.result.work.empty() && f.result.density.empty()) bad_data(name, "no work values");
  if (!(f.log_decades > 0)) bad_data(name, "log_decades must be > 0");
  if (f.resolution && !(*f.resolution > 0 && std::isfinite(*f.resolution)))
    bad_data(name, "resolution must be finite and > 0, found " + number(*f.resolution));
}

// W0 subtracted from a panel's tick labels: 0, or where the panel is narrower than 1e-3 of its
// largest |W| its centre rounded to 10 tick steps (so that %.6g labels still differ).
double tick_offset(double lo, double hi) {
  const double width = hi - lo, size = std::max(std::abs(lo), std::abs(hi));
  if (!(width > 0) || width >= 1e-3 * size) return 0;
  const double coarse = 10 * nice_step(width, 5);
  return std::round(0.5 * (lo + hi) / coarse) * coarse;
}

}  // namespace

// See plot.hpp; plot.py's work_panel_ranges is a port of this function: keep them identical.
WorkPanelRanges work_panel_ranges(const WorkFigure& f) {
  validate_work(f);
  std::vector<const WorkSeries*> series = {&f.result};
  std::vector<std::size_t> slot = {0};  // index of marker_scale and stem_width
  if (f.reference) series.push_back(&*f.reference), slot.push_back(1);
  if (f.noisy) series.push_back(&*f.noisy), slot.push_back(2);
  WorkPanelRanges r;
  double p_max = 0, d_max = 0;
  for (const auto* s : series) {
    for (double p : s->probability) p_max = std::max(p_max, p);
    for (double d : s->density)
      if (std::isfinite(d)) d_max = std::max(d_max, d);
  }
  const double headroom = 1.3;  // above the tallest stem: room for the marker labels
  const bool has_density = d_max > 0 && f.probability_axis != ProbabilityAxis::log;
  r.probability_top = (p_max > 0 ? p_max : 1.0) * headroom;
  r.density_top = has_density ? d_max * headroom : 0;
  // A log panel alone carries the marker labels, so it gets headroom for them too.
  const double log_headroom = f.probability_axis == ProbabilityAxis::log ? 0.5 + 0.2 * f.log_decades : 0.5;
  r.log_top = std::log10(p_max > 0 ? p_max : 1.0) + log_headroom;
  r.log_floor = r.log_top - log_headroom - f.log_decades;

  Range markers, drawn, all_lines;
  if (f.mean_work) markers.add(*f.mean_work);
  if (f.free_energy_change) markers.add(*f.free_energy_change);
  const double floor = std::pow(10.0, r.log_floor);
  std::array<std::size_t, 3> drawn_of = {0, 0, 0};  // lines drawn per slot
  for (std::size_t k = 0; k < series.size(); ++k)
    for (std::size_t i = 0; i < series[k]->work.size(); ++i) {
      all_lines.add(series[k]->work[i]);
      if (series[k]->probability[i] > floor) {
        drawn.add(series[k]->work[i]);
        ++drawn_of[slot[k]];
      } else {
        ++r.lines_below_floor;
      }
    }
  r.lines_drawn = drawn_of[0] + drawn_of[1] + drawn_of[2];
  Range wr = drawn;
  if (!wr.valid())
    for (const auto* s : series) wr.add(s->density_work);
  wr.add(markers.lo);
  wr.add(markers.hi);
  if (!wr.valid()) bad_data("plot_work", "no finite work values");

  // Linear panel: the lines that carry the probability, widened by the broadening, the density's
  // peak and the markers.
  Range linear = bulk_range(series, 1e-3);
  const double sigma = has_density && f.resolution ? *f.resolution : 0.0;
  if (linear.valid()) linear = {linear.lo - 3 * sigma, linear.hi + 3 * sigma};
  for (const auto* s : series) {
    if (s->density.empty()) continue;
    const auto peak = std::max_element(s->density.begin(), s->density.end());
    if (has_density && std::isfinite(*peak) && *peak > 0)
      linear.add(s->density_work[static_cast<std::size_t>(peak - s->density.begin())]);
  }
  linear.add(markers.lo);
  linear.add(markers.hi);
  if (f.probability_axis == ProbabilityAxis::linear) {
    linear.add(all_lines.lo);
    linear.add(all_lines.hi);
  }
  if (!linear.valid()) linear = wr;
  wr = wr.padded(0.04);
  linear = linear.padded(0.08);
  r.own_range = f.probability_axis == ProbabilityAxis::linear_and_log &&
                linear.hi - linear.lo < 0.5 * (wr.hi - wr.lo);
  if (f.probability_axis == ProbabilityAxis::linear_and_log && !r.own_range) {
    wr.add(linear.lo);
    wr.add(linear.hi);
    linear = wr;
  }
  r.linear_lo = linear.lo;
  r.linear_hi = linear.hi;
  r.log_lo = wr.lo;
  r.log_hi = wr.hi;
  r.linear_offset = tick_offset(r.linear_lo, r.linear_hi);
  r.log_offset = tick_offset(r.log_lo, r.log_hi);

  // Log-panel stems thinned with the number drawn, so that thousands of lines stay lines.
  for (std::size_t k = 0; k < 3; ++k) {
    const double n = static_cast<double>(drawn_of[k]);
    const double crowd = n > 40 ? std::sqrt(40.0 / n) : 1.0;
    r.marker_scale[k] = 0.8 * crowd >= 0.2 ? 0.8 * crowd : 0.0;
    r.stem_width[k] = std::max(0.5, 2.2 * crowd);
  }
  return r;
}

std::vector<std::string> work_caption(const WorkFigure& f, const WorkPanelRanges& r) {
  std::vector<std::string> lines;
  if (r.density_top > 0 && f.resolution) {
    std::string text = "densities: the lines broadened by a Gaussian of width #gs = " + number(*f.resolution);
    const auto open = f.work_label.rfind('('), close = f.work_label.rfind(')');
    if (open != std::string::npos && close != std::string::npos && close > open)
      text += " " + f.work_label.substr(open + 1, close - open - 1);
    if (!f.resolution_source.empty()) text += " (" + f.resolution_source + ")";
    lines.push_back(text);
  }
  if (f.noisy && r.density_top > 0) {  // the legend leaves the curves out (draw_work)
    std::string curves = "curves (right axis): solid " + f.result.label;
    if (f.reference) curves += ", dashed " + f.reference->label;
    lines.push_back(curves + ", dotted " + f.noisy->label);
  }
  lines.insert(lines.end(), f.notes.begin(), f.notes.end());
  if (f.result.error_as_band) {  // which boxes the panels show; the rest are below their resolution
    std::size_t with = 0;
    double largest = 0;
    for (std::size_t i = 0; i < f.result.error.size() && i < f.result.probability.size(); ++i)
      if (f.result.error[i] > 0) {
        ++with;
        if (f.result.probability[i] > 0) largest = std::max(largest, f.result.error[i] / f.result.probability[i]);
      }
    std::string shown;
    if (f.probability_axis != ProbabilityAxis::log)
      shown += std::to_string(drawn_error_boxes(f.result, false, 0, r.probability_top)) + " of " + std::to_string(with) +
               " lines in the linear panel";
    if (f.probability_axis != ProbabilityAxis::linear)
      shown += (shown.empty() ? "" : ", ") + std::to_string(drawn_error_boxes(f.result, true, r.log_floor, r.log_top)) +
               " in the log panel";
    char ratio[32];
    std::snprintf(ratio, sizeof ratio, "%.2g", largest);
    lines.push_back("red boxes: ±" + f.result.error_name + " where taller than 6 % of the panel: " + shown +
                    "; largest sd/P " + ratio);
  }
  if (r.lines_below_floor > 0 && f.probability_axis != ProbabilityAxis::linear) {
    char floor[32];
    std::snprintf(floor, sizeof floor, "%.2g", std::pow(10.0, r.log_floor));
    lines.push_back(std::to_string(r.lines_below_floor) + " line" + (r.lines_below_floor == 1 ? "" : "s") +
                    " below P = " + floor + " not drawn in the log panel");
  }
  return lines;
}

namespace {

// A tick-label axis title with the offset stated: "work W (h*kHz)" -> "W - W#d0#u ...".
std::string offset_label(const std::string& label, double offset) {
  if (offset == 0) return label;
  char w0[40];
  std::snprintf(w0, sizeof w0, "%.10g", offset);
  return label + ",  ticks: W - W#d0#u, W#d0#u = " + w0;
}

std::vector<fs::path> draw_work(const fs::path& stem, const WorkFigure& f) {
  const WorkPanelRanges ranges = work_panel_ranges(f);
  const bool has_density = ranges.density_top > 0;
  std::vector<const WorkSeries*> series = {&f.result};
  std::vector<std::size_t> slot = {0};  // 0 result, 1 reference, 2 noisy
  if (f.reference) series.push_back(&*f.reference), slot.push_back(1);
  if (f.noisy) series.push_back(&*f.noisy), slot.push_back(2);
  const double p_top = ranges.probability_top, d_top = ranges.density_top;
  const double log_top = ranges.log_top, log_floor = ranges.log_floor;
  const int log_step = static_cast<int>(std::max(1.0, std::ceil(f.log_decades / 4)));
  const bool own_range = ranges.own_range;
  const std::vector<std::string> caption = work_caption(f, ranges);

  // Legend, column by column: each series (lines above, density below), then the markers.
  std::vector<LegendEntry> by_column;
  for (std::size_t k = 0; k < series.size(); ++k) {
    const WorkSeries& s = *series[k];
    const std::size_t c = slot[k];
    const PLINT colour = c == 0 ? blue : c == 1 ? orange : red;
    by_column.push_back({(s.label.empty() ? std::string("lines") : s.label) + ": P#di#u" +
                             (s.error.empty() ? "" : " ± " + s.error_name),
                         PL_LEGEND_LINE | PL_LEGEND_SYMBOL, colour, solid, 2.2,
                         c == 0 ? "●" : c == 1 ? "○" : "◆", -1});
    // with a noisy series the curves' styles are named in the caption instead (work_caption),
    // so that three series keep a legend of two rows
    by_column.push_back(has_density && !s.density.empty() && !f.noisy
                            ? line_entry("broadened (right axis)", colour,
                                         c == 0 ? solid : c == 1 ? dashed : dotted, 2.2)
                            : LegendEntry{"", PL_LEGEND_NONE, ink, solid, 1, "", -1});
  }
  if (!has_density || f.noisy)  // no density entries: drop the empty places kept for them
    by_column.erase(std::remove_if(by_column.begin(), by_column.end(),
                                   [](const LegendEntry& e) { return e.kind == PL_LEGEND_NONE; }),
                    by_column.end());
  const double left = 0.10, right = has_density ? 0.87 : 0.97;
  // Column-major legend: with two rows each series keeps its lines above its density.
  const int rows = legend_rows(by_column, right - left, has_density ? 2 : 1);
  const std::vector<LegendEntry>& legend = by_column;
  const double legend_bottom = (f.title.empty() ? 0.93 : 0.89) - rows * legend_row_height;
  const double top_edge = legend_bottom - 0.02;
  const double bottom = 0.11 + 0.028 * static_cast<double>(caption.size());  // room for the caption
  std::vector<Panel> panels;
  std::vector<double> shifts;  // per panel: W0 subtracted from every x
  auto linear = [&](double y0, bool x_numbers) {
    Panel p{{left, right, y0, top_edge}, ranges.linear_lo - ranges.linear_offset,
            ranges.linear_hi - ranges.linear_offset, 0, p_top};
    p.x_numbers = x_numbers;
    p.right_axis_free = has_density;
    return p;
  };
  auto logarithmic = [&](double y1) {
    Panel p{{left, right, bottom, y1}, ranges.log_lo - ranges.log_offset, ranges.log_hi - ranges.log_offset,
            log_floor, log_top};
    p.log_y = true;
    p.log_step_y = log_step;
    return p;
  };
  switch (f.probability_axis) {
    case ProbabilityAxis::linear_and_log:
      panels = own_range ? std::vector<Panel>{linear(0.47, true), logarithmic(0.37)}
                         : std::vector<Panel>{linear(0.42, false), logarithmic(0.39)};
      shifts = {ranges.linear_offset, ranges.log_offset};
      break;
    case ProbabilityAxis::linear:
      panels = {linear(bottom, true)};
      shifts = {ranges.linear_offset};
      break;
    case ProbabilityAxis::log:
      panels = {logarithmic(top_edge)};
      shifts = {ranges.log_offset};
      break;
  }
  auto shifted = [](const Vec& v, double by) {
    Vec out(v);
    for (double& x : out) x -= by;
    return out;
  };

  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    for (std::size_t k = 0; k < panels.size(); ++k) {
      const Panel& panel = panels[k];
      const double shift = shifts[k];
      const double distance = draw_frame(panel);
      if (panel.x_numbers) label_bottom(offset_label(f.work_label, shift));
      label_left(panel.log_y ? "P (log scale)" : "probability P", distance);

      // Markers first, so that stems are drawn over them. Labels at two heights so that
      // they cannot overlap; each on its preferred side (Delta F left, <W> right, as
      // <W> >= Delta F for a thermal start, common practice) unless it would leave the panel.
      auto marker = [&](double w, const std::string& text, PLINT colour, PLINT style,
                        bool prefer_left, double height) {
        w -= shift;
        pen(colour, 2.0, style);
        pljoin(w, panel.y_lo, w, panel.y_hi);
        if (panel.log_y && panels.size() > 1) return;
        const double world_per_px =
            (panel.x_hi - panel.x_lo) / ((panel.viewport[1] - panel.viewport[0]) * page_width_px);
        const double width = 1.1 * char_px * text_scale * visible_length(text) * world_per_px;
        const double gap = 6 * world_per_px;
        bool left_side = prefer_left;
        if (left_side && w - gap - width < panel.x_lo) left_side = false;
        else if (!left_side && w + gap + width > panel.x_hi) left_side = true;
        pen(colour, 1);
        plptex(w + (left_side ? -gap : gap), panel.y_lo + height * (panel.y_hi - panel.y_lo), 1,
               0, left_side ? 1.0 : 0.0, text.c_str());
      };
      if (f.free_energy_change)
        marker(*f.free_energy_change, "#gDF = " + number(*f.free_energy_change), purple, dotted,
               true, 0.83);
      if (f.mean_work)
        marker(*f.mean_work, "<W> = " + number(*f.mean_work), green, dashed, false, 0.92);
      const double offset = f.reference ? 0.004 * (panel.x_hi - panel.x_lo) : 0;
      auto scale = [&](std::size_t k) { return panel.log_y ? ranges.marker_scale[k] : 0.8; };
      auto width = [&](std::size_t k) { return panel.log_y ? ranges.stem_width[k] : 2.2; };
      // about 26 px, twice a marker's width: a box shorter than the marker shows beside it
      const double box_width = 0.03 * (panel.x_hi - panel.x_lo);
      if (f.result.error_as_band)  // boxes first: the markers stand on them
        draw_error_bars(f.result, panel.log_y, panel.y_lo, -shift, panel.y_hi, box_width);
      if (f.reference)
        draw_stems(*f.reference, panel.log_y, panel.y_lo, offset - shift, orange, Marker::ring, scale(1), width(1));
      draw_stems(f.result, panel.log_y, panel.y_lo, -shift, blue, Marker::disc, scale(0), width(0));
      if (!f.result.error_as_band)  // bars with caps over the stems (e.g. standard errors)
        draw_error_bars(f.result, panel.log_y, panel.y_lo, -shift, panel.y_hi, box_width);
      if (f.noisy) {
        const double left_of = -0.004 * (panel.x_hi - panel.x_lo) - shift;
        draw_stems(*f.noisy, panel.log_y, panel.y_lo, left_of, red, Marker::diamond, scale(2), width(2));
        draw_error_bars(*f.noisy, panel.log_y, panel.y_lo, left_of, panel.y_hi, box_width);
      }

      if (has_density && !panel.log_y) {
        label_right(f.density_label.empty() ? "density (right axis)" : f.density_label,
                    draw_right_axis(panel, d_top));
        if (f.reference && !f.reference->density.empty()) {
          pen(orange, 2.2, dashed);
          draw_line(shifted(f.reference->density_work, shift), f.reference->density);
        }
        pen(blue, 2.2);
        draw_line(shifted(f.result.density_work, shift), f.result.density);
        if (f.noisy && !f.noisy->density.empty()) {
          pen(red, 2.2, dotted);
          draw_line(shifted(f.noisy->density_work, shift), f.noisy->density);
        }
      }
    }
    plvpor(0, 1, 0, 1);
    plwind(0, 1, 0, 1);
    pen(ink, 1);
    double caption_scale = 0.85;  // one size for all lines, the longest fitting the page
    for (const auto& line : caption) caption_scale = std::min(caption_scale, fitting_scale(line, 0.96 * page_width_px, 0.85));
    plschr(0, caption_scale);
    for (std::size_t i = 0; i < caption.size(); ++i)  // the caption lines, the last at the bottom
      plptex(0.5, 0.02 + 0.028 * static_cast<double>(caption.size() - 1 - i), 1, 0, 0.5, caption[i].c_str());
    plschr(0, text_scale);
    draw_legend_above(legend, {left, right, bottom, top_edge}, legend_bottom, rows);
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

void validate_sweep_data(const std::string& name, const std::vector<SweepPoints>& points,
                         const std::vector<SweepCurve>& curves) {
  for (const auto& p : points) {
    check_same_size(name, "'" + p.label + "' x and y", p.x, p.y);
    if (!p.spread.empty()) check_same_size(name, "'" + p.label + "' y and spread", p.y, p.spread);
  }
  for (const auto& c : curves) {
    check_same_size(name, "curve '" + c.label + "' x and y", c.x, c.y);
    if (!std::is_sorted(c.x.begin(), c.x.end()))
      bad_data(name, "curve '" + c.label + "': x must be ascending");
  }
}

// One panel of a sweep figure as drawn: points and curves mapped to the axes (log10 where an
// axis is logarithmic; values <= 0 there become NaN and are left out), and their y range.
struct DrawnSweepPanel {
  std::vector<DrawnPoints> points;
  std::vector<std::pair<Vec, Vec>> curves;
  Range y;
};

DrawnSweepPanel drawn_sweep_panel(const std::vector<SweepPoints>& points, const std::vector<SweepCurve>& curves,
                                  bool log_y, const std::function<double(double)>& shown_x, Range& xr) {
  const auto shown_y = [&](double y) { return log_y ? (y > 0 ? std::log10(y) : NAN) : y; };
  DrawnSweepPanel out;
  Range curve_y;
  for (const auto& p : points) {
    DrawnPoints d{{}, {}, {}, {}, !p.spread.empty()};
    for (std::size_t i = 0; i < p.y.size(); ++i) {
      const double s = p.spread.empty() ? 0 : std::abs(p.spread[i]);
      const double x = shown_x(p.x[i]), y = shown_y(p.y[i]);
      if (!std::isfinite(x) || !std::isfinite(y)) continue;
      d.x.push_back(x);
      d.y.push_back(y);
      d.lo.push_back(shown_y(p.y[i] - s));  // NaN on a log axis: clamped to the floor below
      d.hi.push_back(shown_y(p.y[i] + s));
    }
    xr.add(d.x);
    out.y.add(d.y);
    out.y.add(d.lo);
    out.y.add(d.hi);
    out.points.push_back(d);
  }
  for (const auto& c : curves) {
    Vec x, y;
    for (std::size_t i = 0; i < c.x.size(); ++i) {
      x.push_back(shown_x(c.x[i]));
      y.push_back(shown_y(c.y[i]));
    }
    xr.add(x);
    curve_y.add(y);
    out.curves.emplace_back(std::move(x), std::move(y));
  }
  // On a log axis a curve's zeros would stretch the range over many decades: the points set
  // it there (the curves are clipped at the panel's edge), the curves only where there are none.
  if (!log_y || !out.y.valid()) {
    out.y.add(curve_y.lo);
    out.y.add(curve_y.hi);
  }
  return out;
}

// A log axis (log10 lo .. hi) that holds fewer than two labelled decades is widened to whole
// decades, so that its ticks carry numbers.
Range whole_decades(Range r) {
  if (std::floor(r.hi) - std::ceil(r.lo) >= 1) return r;
  return {std::floor(r.lo), std::ceil(r.hi)};
}

// Every n-th decade labelled, so that labels about 30 px apart do not overlap.
int decade_step(double decades, double height_px) {
  return std::max(1, static_cast<int>(std::ceil(decades / std::max(1.0, height_px / 30))));
}

std::vector<fs::path> draw_sweep(const fs::path& stem, const SweepFigure& f) {
  const std::string name = "plot_sweep";
  if (f.points.empty() && f.curves.empty()) bad_data(name, "nothing to draw");
  validate_sweep_data(name, f.points, f.curves);
  for (const auto& panel : f.panels) validate_sweep_data(name, panel.points, panel.curves);
  if (f.departure != Departure::none && f.curves.empty())
    bad_data(name, "a departure panel needs an analytic curve");
  const std::function<double(double)> shown_x = [&](double x) {
    return f.log_x ? (x > 0 ? std::log10(x) : NAN) : x;
  };

  const bool relative = f.departure == Departure::relative;
  Range xr, dr;
  dr.add(0.0);
  DrawnSweepPanel main_data = drawn_sweep_panel(f.points, f.curves, f.log_y, shown_x, xr);
  std::vector<DrawnPoints> departures;
  for (const auto& p : f.points) {
    DrawnPoints e{{}, {}, {}, {}, !p.spread.empty()};
    for (std::size_t i = 0; i < p.y.size() && f.departure != Departure::none; ++i) {
      const double s = p.spread.empty() ? 0 : std::abs(p.spread[i]);
      const double c = interpolate(f.curves[0], p.x[i]);
      double dev = p.y[i] - c, err = s;
      if (relative) {
        if (c == 0) continue;
        dev /= c;
        err /= std::abs(c);
      }
      if (!std::isfinite(dev) || !std::isfinite(shown_x(p.x[i]))) continue;
      e.x.push_back(shown_x(p.x[i]));
      e.y.push_back(dev);
      e.lo.push_back(dev - err);
      e.hi.push_back(dev + err);
    }
    dr.add(e.lo);
    dr.add(e.hi);
    departures.push_back(e);
  }
  std::vector<DrawnSweepPanel> more;
  for (const auto& panel : f.panels) more.push_back(drawn_sweep_panel(panel.points, panel.curves, panel.log_y, shown_x, xr));
  if (!xr.valid() || !main_data.y.valid()) bad_data(name, "no finite values");
  xr = xr.padded(0.03);
  main_data.y = main_data.y.padded(0.06);
  if (f.log_y) main_data.y = whole_decades(main_data.y);
  dr = dr.padded(0.1);
  // Error bars reaching below 0 on a log axis end at the panel's floor.
  auto clamp_to_floor = [](DrawnSweepPanel& d) {
    for (auto& p : d.points)
      for (double& v : p.lo)
        if (!std::isfinite(v)) v = d.y.lo;
  };
  clamp_to_floor(main_data);
  for (std::size_t i = 0; i < more.size(); ++i) {
    DrawnSweepPanel& d = more[i];
    if (!d.y.valid()) d.y = {0, 1};
    d.y = d.y.padded(0.06);
    if (f.panels[i].log_y) d.y = whole_decades(d.y);
    clamp_to_floor(d);
  }

  std::vector<LegendEntry> legend;
  auto add_entries = [&](const std::vector<SweepPoints>& points, const std::vector<SweepCurve>& curves,
                         const DrawnSweepPanel& d) {
    auto known = [&](const std::string& text) {
      return text.empty() ||  // an unlabelled curve (a marker line) stays out of the legend
             std::any_of(legend.begin(), legend.end(), [&](const LegendEntry& e) { return e.text == text; });
    };
    for (std::size_t k = 0; k < points.size(); ++k) {
      if (known(points[k].label)) continue;
      LegendEntry e{points[k].label, PL_LEGEND_SYMBOL, point_colours[k % 3], solid, 1.6, "●", -1};
      if (d.points[k].spread && f.spread_as_band) {
        e.kind |= PL_LEGEND_COLOR_BOX;
        e.fill_colour = point_fills[k % 3];
      }
      legend.push_back(e);
    }
    for (std::size_t k = 0; k < curves.size(); ++k)
      if (!known(curves[k].label))
        legend.push_back(line_entry(curves[k].label, curve_colours[k % 3], k == 0 ? solid : dashed, 2.4));
  };
  add_entries(f.points, f.curves, main_data);
  for (std::size_t i = 0; i < f.panels.size(); ++i) add_entries(f.panels[i].points, f.panels[i].curves, more[i]);
  const int rows = legend_rows(legend, 0.86, 1);

  // Panels stacked from the top: the main one (weight 1.6), its departure panel and the further
  // ones (weight 1 each). With more than two panels each is too short for a rotated y label:
  // the labels stand above their panels (gaps leave room for them and the departure note).
  const bool departure_panel = f.departure != Departure::none;
  const double legend_bottom = (f.title.empty() ? 0.93 : 0.89) - rows * legend_row_height;
  const std::size_t below = (departure_panel ? 1 : 0) + f.panels.size();
  const bool labels_on_top = below >= 2;
  const double top_edge = legend_bottom - (labels_on_top ? 0.05 : 0.02);
  const double gap = labels_on_top ? 0.065 : 0.06;
  const double unit = (top_edge - 0.11 - gap * static_cast<double>(below)) / (1.6 + static_cast<double>(below));
  double y_top = top_edge;
  auto next_viewport = [&](double weight) {
    const std::array<double, 4> v = {0.11, 0.97, y_top - weight * unit, y_top};
    y_top -= weight * unit + gap;
    return v;
  };
  auto log_step = [&](const Panel& p) {
    return decade_step(p.y_hi - p.y_lo, (p.viewport[3] - p.viewport[2]) * page_height_px);
  };
  Panel main{next_viewport(1.6), xr.lo, xr.hi, main_data.y.lo, main_data.y.hi};
  main.x_numbers = below == 0;
  main.log_x = f.log_x;
  main.log_y = f.log_y;
  main.log_step_y = log_step(main);
  Panel lower{departure_panel ? next_viewport(1) : std::array<double, 4>{}, xr.lo, xr.hi, dr.lo, dr.hi};
  lower.log_x = f.log_x;
  lower.x_numbers = f.panels.empty();
  std::vector<Panel> further;
  for (std::size_t i = 0; i < f.panels.size(); ++i) {
    Panel p{next_viewport(1), xr.lo, xr.hi, more[i].y.lo, more[i].y.hi};
    p.log_x = f.log_x;
    p.log_y = f.panels[i].log_y;
    p.log_step_y = log_step(p);
    p.x_numbers = i + 1 == f.panels.size();
    further.push_back(p);
  }
  // A panel's y label: rotated on the left, or above the panel on its left (labels_on_top).
  auto y_label = [&](const std::string& text, double distance, const std::string& note) {
    if (!labels_on_top) {
      label_left(text, distance);
      return;
    }
    pen(ink, 1);
    const std::string line = note.empty() ? text : text + "     " + note;
    PLFLT x0, x1, y0, y1;
    plgvpd(&x0, &x1, &y0, &y1);
    plschr(0, fitting_scale(line, (x1 - x0) * page_width_px, 0.9));
    plmtex("t", 0.7, 0.0, 0.0, line.c_str());
    plschr(0, text_scale);
  };
  auto draw_contents = [&](const DrawnSweepPanel& d) {
    for (std::size_t k = 0; k < d.points.size(); ++k) draw_points(d.points[k], f.spread_as_band, k);
    for (std::size_t k = 0; k < d.curves.size(); ++k) {
      pen(curve_colours[k % 3], 2.4, k == 0 ? solid : dashed);
      draw_line(d.curves[k].first, d.curves[k].second);
    }
  };

  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    const double distance = draw_frame(main);
    if (main.x_numbers) label_bottom(f.x_label);
    y_label(f.y_label, distance, "");
    draw_contents(main_data);
    if (departure_panel) {
      const double lower_distance = draw_frame(lower);
      if (lower.x_numbers) label_bottom(f.x_label);
      const std::string note =
          (relative ? "below: (y - c) / c,  c = " : "below: y - c,  c = ") + f.curves[0].label;
      const std::string label = !f.departure_label.empty() ? f.departure_label
                                : relative                 ? "relative departure"
                                                           : "departure";
      if (labels_on_top) {
        // a departure_label says what is subtracted already; the generic note would crowd it
        y_label(label, lower_distance, f.departure_label.empty() ? "(" + note.substr(7) + ")" : "");
      } else {
        label_left(label, lower_distance);
        pen(ink, 1);
        plschr(0, 0.85);
        plmtex("t", 0.9, 0.0, 0.0, note.c_str());
        plschr(0, text_scale);
      }
      pen(curve_colours[0], 1.8, dashed);
      pljoin(xr.lo, 0, xr.hi, 0);
      for (std::size_t k = 0; k < departures.size(); ++k)
        draw_points(departures[k], f.spread_as_band, k);
    }
    for (std::size_t i = 0; i < further.size(); ++i) {
      const double d = draw_frame(further[i]);
      if (further[i].x_numbers) label_bottom(f.x_label);
      y_label(f.panels[i].y_label, d, "");
      draw_contents(more[i]);
    }
    draw_legend_above(legend, main.viewport, legend_bottom, rows);
  });
}

// ---- (e) stacked panels over one x ---------------------------------------------------------

constexpr std::array<PLINT, 7> stack_colours = {ink, blue, orange, green, red, purple, grey};

std::vector<fs::path> draw_stack(const fs::path& stem, const StackedFigure& f) {
  const std::string name = "plot_stack";
  if (f.panels.empty() || f.panels.size() > 6) bad_data(name, "needs one to six panels");
  Range xr;
  std::vector<Range> yr(f.panels.size());
  std::vector<std::vector<LegendEntry>> legends(f.panels.size());
  std::vector<int> rows(f.panels.size());
  double legend_height = 0;
  for (std::size_t i = 0; i < f.panels.size(); ++i) {
    const StackPanel& p = f.panels[i];
    if (p.curves.empty()) bad_data(name, "panel '" + p.y_label + "': nothing to draw");
    for (std::size_t k = 0; k < p.curves.size(); ++k) {
      const SweepCurve& c = p.curves[k];
      check_same_size(name, "curve '" + c.label + "' x and y", c.x, c.y);
      if (!std::is_sorted(c.x.begin(), c.x.end())) bad_data(name, "curve '" + c.label + "': x must be ascending");
      xr.add(c.x);
      yr[i].add(c.y);
      LegendEntry e = line_entry(c.label, stack_colours[k % 7], solid, 2.2);
      if (p.markers) {
        e.kind |= PL_LEGEND_SYMBOL;
        e.symbol = "●";
      }
      legends[i].push_back(e);
    }
    if (!yr[i].valid()) yr[i] = {0, 1};  // a panel of NaN only (nothing computed): an empty frame
    yr[i] = yr[i].padded(0.08);
    rows[i] = legend_rows(legends[i], 0.86, 1);
    legend_height += rows[i] * legend_row_height + 0.02;
  }
  if (!xr.valid()) bad_data(name, "no finite x values");
  xr = xr.padded(0.02);
  const double top = f.title.empty() ? 0.93 : 0.89, bottom = 0.09;
  const double gap = 0.015, n = static_cast<double>(f.panels.size());
  const double height = (top - bottom - legend_height - gap * (n - 1)) / n;
  if (!(height > 0.05)) bad_data(name, "too many legend rows for the panels");
  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    double y = top;
    for (std::size_t i = 0; i < f.panels.size(); ++i) {
      const StackPanel& p = f.panels[i];
      const double legend_bottom = y - rows[i] * legend_row_height;
      const double panel_top = legend_bottom - 0.02;
      Panel frame{{0.11, 0.97, panel_top - height, panel_top}, xr.lo, xr.hi, yr[i].lo, yr[i].hi};
      frame.x_numbers = i + 1 == f.panels.size();  // one x axis: numbers under the lowest panel
      const double distance = draw_frame(frame);
      label_left(p.y_label, distance);
      if (i + 1 == f.panels.size()) label_bottom(f.x_label);
      for (std::size_t k = 0; k < p.curves.size(); ++k) {
        pen(stack_colours[k % 7], 2.2);
        draw_line(p.curves[k].x, p.curves[k].y);
        if (p.markers) {
          plschr(0, 0.55);
          Vec mx, my;
          for (std::size_t j = 0; j < p.curves[k].x.size(); ++j)
            if (std::isfinite(p.curves[k].y[j])) {
              mx.push_back(p.curves[k].x[j]);
              my.push_back(p.curves[k].y[j]);
            }
          if (!mx.empty()) plstring(static_cast<PLINT>(mx.size()), mx.data(), my.data(), "●");
          plschr(0, text_scale);
        }
      }
      draw_legend_above(legends[i], frame.viewport, legend_bottom, rows[i]);
      y = panel_top - height - gap;
    }
  });
}

}  // namespace

std::vector<fs::path> plot_stack(const fs::path& stem, const StackedFigure& figure) {
  return draw_stack(stem, figure);
}

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

// ---- (d) measured data against a model -------------------------------------------------

namespace trapwork {
namespace {

std::vector<fs::path> draw_comparison(const fs::path& stem, const ComparisonFigure& f) {
  const std::string name = "plot_comparison";
  if (f.edges.size() < 2) bad_data(name, "needs at least one bin (two edges)");
  const std::size_t bins = f.edges.size() - 1;
  if (f.observed.size() != bins || f.expected.size() != bins)
    bad_data(name, "observed and expected need one value per bin (" + std::to_string(bins) + ")");
  for (std::size_t k = 0; k <= bins; ++k)
    if (!std::isfinite(f.edges[k]) || (k > 0 && !(f.edges[k] > f.edges[k - 1])))
      bad_data(name, "bin edges must be finite and ascending");
  for (std::size_t k = 0; k < bins; ++k)
    if (!(f.observed[k] >= 0) || !(f.expected[k] >= 0) || !std::isfinite(f.observed[k]) ||
        !std::isfinite(f.expected[k]))
      bad_data(name, "bin " + std::to_string(k) + " needs finite counts >= 0");
  check_same_size(name, "curve", f.curve_work, f.curve);

  Range yr, pr;
  yr.add(0.0);
  pr.add(-3.0);
  pr.add(3.0);
  Vec centre(bins), pull(bins, NAN), pull_x, pull_y;
  for (std::size_t k = 0; k < bins; ++k) {
    centre[k] = 0.5 * (f.edges[k] + f.edges[k + 1]);
    yr.add(f.observed[k] + std::sqrt(f.observed[k]));
    yr.add(f.expected[k]);
    if (f.expected[k] >= 1) {  // bins expecting less than one run would only add clutter near 0
      pull[k] = (f.observed[k] - f.expected[k]) / std::sqrt(f.expected[k]);
      pull_x.push_back(centre[k]);
      pull_y.push_back(pull[k]);
      pr.add(pull[k]);
    }
  }
  yr.add(f.curve);
  const double x_lo = f.edges.front(), x_hi = f.edges.back();
  const double pad = 0.02 * (x_hi - x_lo);
  const double y_top = yr.hi * 1.15;
  const Range pp = pr.padded(0.1);

  std::vector<LegendEntry> legend = {
      {f.observed_label + " (±√count)", PL_LEGEND_COLOR_BOX, blue, solid, 1, "", blue_fill},
      line_entry(f.expected_label + ": expected runs per bin", orange, solid, 2.4)};
  if (!f.curve.empty()) legend.push_back(line_entry(f.expected_label + " density x runs x bin width", orange, dashed, 1.8));
  if (f.model_mean) legend.push_back(line_entry("model <W>", green, dashed, 2.0));
  if (f.data_mean) legend.push_back(line_entry("measured <W>", purple, dotted, 2.0));
  const double left = 0.11, right = 0.97;
  const int rows = legend_rows(legend, right - left, 1);
  const double legend_bottom = (f.title.empty() ? 0.93 : 0.89) - rows * legend_row_height;
  const double top_edge = legend_bottom - 0.02;
  Panel main{{left, right, 0.40, top_edge}, x_lo - pad, x_hi + pad, 0, y_top};
  main.x_numbers = false;
  Panel lower{{left, right, 0.11, 0.36}, x_lo - pad, x_hi + pad, pp.lo, pp.hi};

  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    const double distance = draw_frame(main);
    label_left(f.count_label.empty() ? "runs per bin" : f.count_label, distance);
    for (std::size_t k = 0; k < bins; ++k) {  // filled bars
      if (!(f.observed[k] > 0)) continue;
      pen(blue_fill, 1);
      fill_polygon({f.edges[k], f.edges[k + 1], f.edges[k + 1], f.edges[k]}, {0, 0, f.observed[k], f.observed[k]});
    }
    Vec lo(bins), hi(bins);
    for (std::size_t k = 0; k < bins; ++k) {
      lo[k] = std::max(0.0, f.observed[k] - std::sqrt(f.observed[k]));
      hi[k] = f.observed[k] + std::sqrt(f.observed[k]);
    }
    pen(blue, 1.4);
    plerry(static_cast<PLINT>(bins), centre.data(), lo.data(), hi.data());
    Vec sx, sy;  // the expected counts as steps
    for (std::size_t k = 0; k < bins; ++k) {
      sx.insert(sx.end(), {f.edges[k], f.edges[k + 1]});
      sy.insert(sy.end(), {f.expected[k], f.expected[k]});
    }
    pen(orange, 2.4);
    draw_line(sx, sy);
    if (!f.curve.empty()) {
      pen(orange, 1.8, dashed);
      draw_line(f.curve_work, f.curve);
    }
    if (f.model_mean) {
      pen(green, 2.0, dashed);
      pljoin(*f.model_mean, 0, *f.model_mean, y_top);
    }
    if (f.data_mean) {
      pen(purple, 2.0, dotted);
      pljoin(*f.data_mean, 0, *f.data_mean, y_top);
    }
    const double lower_distance = draw_frame(lower);
    label_bottom(f.work_label);
    label_left("pull (O - E)/√E", lower_distance);
    pen(grey, 1.5, dashed);
    pljoin(main.x_lo, 0, main.x_hi, 0);
    pen(blue, 1);
    plschr(0, 0.75);
    if (!pull_x.empty()) plstring(static_cast<PLINT>(pull_x.size()), pull_x.data(), pull_y.data(), "●");
    plschr(0, text_scale);
    draw_legend_above(legend, main.viewport, legend_bottom, rows);
  });
}

}  // namespace

std::vector<fs::path> plot_comparison(const fs::path& stem, const ComparisonFigure& figure) {
  return draw_comparison(stem, figure);
}

// ---- a map over two swept parameters --------------------------------------------------------

namespace {

// Cell edges around ascending centres: half way between neighbours, half a spacing beyond the
// ends (a single centre gets a unit-scale width).
Vec cell_edges(const Vec& c) {
  Vec e(c.size() + 1);
  if (c.size() == 1) {
    const double h = 0.1 * std::max(std::abs(c[0]), 1.0);
    return {c[0] - h, c[0] + h};
  }
  for (std::size_t i = 1; i < c.size(); ++i) e[i] = 0.5 * (c[i - 1] + c[i]);
  e.front() = c.front() - (e[1] - c.front());
  e.back() = c.back() + (c.back() - e[c.size() - 1]);
  return e;
}

// Colour map 1: dark blue through teal and green to yellow (a perceptually ordered ramp).
void map_colours() {
  const std::array<PLFLT, 4> at = {0, 0.35, 0.7, 1};
  const std::array<PLFLT, 4> r = {0.27, 0.13, 0.45, 0.99}, g = {0.0, 0.56, 0.82, 0.91}, b = {0.33, 0.55, 0.33, 0.14};
  plscmap1n(256);
  plscmap1l(1, 4, at.data(), r.data(), g.data(), b.data(), nullptr);
}

}  // namespace

std::vector<fs::path> plot_sweep_map(const fs::path& stem, const SweepMapFigure& f) {
  const std::string name = "sweep map " + f.stem;
  const bool scatter = !f.point_x.empty();
  Range zr;
  if (scatter) {
    if (f.point_y.size() != f.point_x.size() || f.point_z.size() != f.point_x.size())
      bad_data(name, "point_x, point_y and point_z differ in length");
    for (std::size_t i = 0; i < f.point_x.size(); ++i)
      if (!std::isfinite(f.point_x[i]) || !std::isfinite(f.point_y[i])) bad_data(name, "a point off the axes (not finite)");
    zr.add(f.point_z);
  } else {
    if (f.x.empty() || f.y.empty()) bad_data(name, "no cells");
    if (f.z.size() != f.x.size()) bad_data(name, "z has " + std::to_string(f.z.size()) + " rows for " + std::to_string(f.x.size()) + " x values");
    for (const auto& row : f.z)
      if (row.size() != f.y.size()) bad_data(name, "a row of z differs in length from y");
    for (const auto& row : f.z) zr.add(row);
  }
  if (!zr.valid()) bad_data(name, "no finite value to colour");
  const bool contours = !f.contour_x.empty() && !f.contour_y.empty();
  if (contours) {
    if (f.contour_z.size() != f.contour_x.size()) bad_data(name, "contour_z rows differ from contour_x");
    for (const auto& row : f.contour_z) {
      if (row.size() != f.contour_y.size()) bad_data(name, "a row of contour_z differs in length from contour_y");
      for (double v : row)
        if (!std::isfinite(v)) bad_data(name, "contour values must be finite");
    }
  }
  Vec xe, ye;  // the axes' ends: cell edges, or for a scatter map the points' range with a margin
  if (scatter) {
    Range xr, yr;
    xr.add(f.point_x);
    yr.add(f.point_y);
    const Range xp = xr.padded(0.08), yp = yr.padded(0.08);
    xe = {xp.lo, xp.hi};
    ye = {yp.lo, yp.hi};
  } else {
    xe = cell_edges(f.x);
    ye = cell_edges(f.y);
  }
  const double z_lo = zr.lo, z_span = zr.hi > zr.lo ? zr.hi - zr.lo : 1.0;
  return write_png_and_svg(stem, [&] {
    figure_title(f.title);
    map_colours();
    Panel p{{0.1, 0.8, 0.12, 0.84}, xe.front(), xe.back(), ye.front(), ye.back()};
    p.grid_lines = false;  // drawn last (the frame over the cells), they would cross cells and markers
    make_room_for_left_label(p);
    plvpor(p.viewport[0], p.viewport[1], p.viewport[2], p.viewport[3]);
    plwind(p.x_lo, p.x_hi, p.y_lo, p.y_hi);
    for (std::size_t i = 0; i < (scatter ? 0 : f.x.size()); ++i)
      for (std::size_t j = 0; j < f.y.size(); ++j) {
        if (!std::isfinite(f.z[i][j])) continue;  // a blank cell
        plcol1((f.z[i][j] - z_lo) / z_span);
        PLFLT cx[4] = {xe[i], xe[i + 1], xe[i + 1], xe[i]}, cy[4] = {ye[j], ye[j], ye[j + 1], ye[j + 1]};
        plfill(4, cx, cy);
      }
    if (contours) {
      Range cr;
      for (const auto& row : f.contour_z) cr.add(row);
      if (cr.hi > cr.lo) {
        const double step = nice_step(cr.hi - cr.lo, 7);
        Vec levels;
        for (double v = std::ceil(cr.lo / step) * step; v <= cr.hi; v += step) levels.push_back(v);
        std::vector<const PLFLT*> rows;
        for (const auto& row : f.contour_z) rows.push_back(row.data());
        Vec xg = f.contour_x, yg = f.contour_y;
        PLcGrid grid{xg.data(), yg.data(), nullptr, static_cast<PLINT>(xg.size()), static_cast<PLINT>(yg.size()), 0};
        pen(scatter ? grey : white, scatter ? 1.5 : 2.5);  // white over cells, grey between markers
        pl_setcontlabelformat(4, 3);
        pl_setcontlabelparam(0.006, 0.55, 0.35, 1);
        plcont(rows.data(), static_cast<PLINT>(xg.size()), static_cast<PLINT>(yg.size()), 1,
               static_cast<PLINT>(xg.size()), 1, static_cast<PLINT>(yg.size()), levels.data(),
               static_cast<PLINT>(levels.size()), pltr1, &grid);
        pl_setcontlabelparam(0.006, 0.3, 0.1, 0);
      }
    }
    if (scatter) {  // markers over the contours: a disc of radius 1.4 % of the frame's width (round on the page)
      PLFLT vx0, vx1, vy0, vy1, xmin_mm, xmax_mm, ymin_mm, ymax_mm;
      plgvpd(&vx0, &vx1, &vy0, &vy1);
      plgspa(&xmin_mm, &xmax_mm, &ymin_mm, &ymax_mm);
      const Disc disc(0.014 * (vx1 - vx0) * (xmax_mm - xmin_mm));
      for (std::size_t i = 0; i < f.point_x.size(); ++i) {
        PLFLT cx[Disc::max_sides + 1], cy[Disc::max_sides + 1];
        disc.outline(f.point_x[i], f.point_y[i], cx, cy);
        if (std::isfinite(f.point_z[i])) {
          plcol1((f.point_z[i] - z_lo) / z_span);
          plfill(disc.sides, cx, cy);
        }
        pen(ink, 1.0);
        plline(disc.sides + 1, cx, cy);
      }
    }
    const double distance = draw_frame(p);
    label_bottom(f.x_label);
    label_left(f.y_label, distance);
    if (contours) label_top("contours: " + f.contour_label);
    // The colour bar: a column of cells from the smallest to the largest value, its axis on the right.
    Panel bar{{0.86, 0.89, 0.12, 0.84}, 0, 1, z_lo, z_lo + z_span};
    plvpor(bar.viewport[0], bar.viewport[1], bar.viewport[2], bar.viewport[3]);
    plwind(0, 1, bar.y_lo, bar.y_hi);
    constexpr int steps = 100;
    for (int k = 0; k < steps; ++k) {
      plcol1((k + 0.5) / steps);
      const double a = z_lo + z_span * k / steps, b = z_lo + z_span * (k + 1) / steps;
      PLFLT cx[4] = {0, 1, 1, 0}, cy[4] = {a, a, b, b};
      plfill(4, cx, cy);
    }
    pen(ink, 1.5);
    const double tick = nice_step(z_span, 6);
    box("bc", "bcmstv", 1, z_span, 1, 0, tick);
    label_right(f.colour_label, label_distance(bar.y_lo, bar.y_hi, tick, false, 1) + 0.5);
  });
}

}  // namespace trapwork
