// The key reference of scenario files (see keys.hpp). Defaults that the library holds are
// printed from its own default values (SpectrumOptions, WorkRequest), so they cannot drift.
#include "solver/scenario/keys.hpp"

#include <algorithm>
#include <cctype>
#include <charconv>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/moving_wall.hpp"
#include "solver/spectrum.hpp"
#include "solver/work.hpp"

namespace trapwork {

namespace {

std::string number_text(double v) {
  char buffer[32];
  const auto r = std::to_chars(buffer, buffer + sizeof buffer, v);
  return std::string(buffer, r.ptr);
}

KeySpec quantity(std::string name, Dimension d, std::string default_text, std::string meaning, std::string example) {
  return {std::move(name), KeyType::quantity, d, std::move(default_text), {}, std::move(meaning), std::move(example)};
}
KeySpec plain(std::string name, std::string default_text, std::string meaning, std::string example) {
  return {std::move(name), KeyType::number, {}, std::move(default_text), {}, std::move(meaning), std::move(example)};
}
KeySpec whole(std::string name, std::string default_text, std::string meaning, std::string example) {
  return {std::move(name), KeyType::integer, {}, std::move(default_text), {}, std::move(meaning), std::move(example)};
}
KeySpec flag(std::string name, std::string default_text, std::string meaning, std::string example) {
  return {std::move(name), KeyType::boolean, {}, std::move(default_text), {}, std::move(meaning), std::move(example)};
}
KeySpec text(std::string name, std::string default_text, std::string meaning, std::string example) {
  return {std::move(name), KeyType::text, {}, std::move(default_text), {}, std::move(meaning), std::move(example)};
}
KeySpec choice(std::string name, std::vector<std::string> choices, std::string default_text, std::string meaning) {
  std::string example = "\"" + choices.back() + "\"";
  return {std::move(name), KeyType::choice, {}, std::move(default_text), std::move(choices), std::move(meaning),
          std::move(example)};
}
KeySpec array(std::string name, std::optional<Dimension> d, std::string default_text, std::string meaning,
              std::string example) {
  return {std::move(name), KeyType::array, d, std::move(default_text), {}, std::move(meaning), std::move(example)};
}
KeySpec sub(std::string name, KeyType type, std::string default_text, std::string meaning, std::string example = {}) {
  return {std::move(name), type, {}, std::move(default_text), {}, std::move(meaning), std::move(example)};
}

KeySpec centre() {
  return quantity("centre", Dimension::length(), "0 um", "position of the term's centre (every shape shifts with it)", "\"0.1 um\"");
}

}  // namespace

const std::vector<ShapeSpec>& shape_specs() {
  static const std::vector<ShapeSpec> shapes = [] {
    std::vector<ShapeSpec> s;
    s.push_back({Shape::harmonic,
                 "V(x) = (1/2) m omega^2 (x - centre)^2, omega = 2 pi frequency",
                 {quantity("frequency", Dimension::frequency(), "required",
                           "trap frequency f (> 0); the first harmonic or polynomial frequency sets the units",
                           "\"1 MHz\""),
                  centre()},
                 {}});
    std::vector<KeySpec> poly = {
        quantity("frequency", Dimension::frequency(), "0 Hz", "harmonic frequency f (>= 0)", "\"1 MHz\""),
        centre(),
        quantity("linear", Dimension::energy_per_length(1), "0 h*kHz/um",
                 "c1: a static force term c1 (x - centre), the force on the particle is -c1", "\"0.5 h*kHz/um\"")};
    const char* orders[] = {"cubic", "quartic", "quintic", "sextic", "septic", "octic"};
    for (int n = 3; n <= 8; ++n)
      poly.push_back(quantity(orders[n - 3], Dimension::energy_per_length(n), "0",
                              std::string("c").append(std::to_string(n)).append(", coefficient of (x - centre)^")
                                  .append(std::to_string(n)),
                              std::string("\"1e-").append(std::to_string(n)).append(" h*kHz/um^")
                                  .append(std::to_string(n)).append("\"")));
    s.push_back({Shape::polynomial,
                 "V(x) = (1/2) m omega^2 y^2 + c1 y + c3 y^3 + c4 y^4 + ... + c8 y^8, y = x - centre, omega = 2 pi "
                 "frequency",
                 poly,
                 {}});
    s.push_back({Shape::gaussian,
                 "V(x) = -depth exp(-2 (x - centre)^2 / waist^2) (optical tweezer; waist: 1/e^2 intensity radius)",
                 {quantity("depth", Dimension::energy(), "0", "well depth (> 0 for a trap)", "\"20 kB*uK\""),
                  quantity("waist", Dimension::length(), "required", "1/e^2 intensity radius (> 0)", "\"0.8 um\""), centre()},
                 {}});
    s.push_back({Shape::double_well,
                 "V(x) = barrier ((y/a)^2 - 1)^2 + tilt y/a, y = x - centre, a = separation/2",
                 {quantity("barrier", Dimension::energy(), "0", "height of the central barrier above the minima", "\"5 h*kHz\""),
                  quantity("separation", Dimension::length(), "required", "distance between the two minima (> 0)", "\"1 um\""),
                  quantity("tilt", Dimension::energy(), "0", "energy tilt between the wells", "\"0.2 h*kHz\""), centre()},
                 {}});
    s.push_back({Shape::morse,
                 "V(x) = depth (1 - exp(-(x - centre)/range))^2",
                 {quantity("depth", Dimension::energy(), "0", "dissociation energy", "\"50 h*kHz\""),
                  quantity("range", Dimension::length(), "required", "range of the well (> 0)", "\"0.2 um\""), centre()},
                 {}});
    s.push_back({Shape::poschl_teller,
                 "V(x) = -depth / cosh^2((x - centre)/width)",
                 {quantity("depth", Dimension::energy(), "0", "well depth", "\"20 h*kHz\""),
                  quantity("width", Dimension::length(), "required", "width of the well (> 0)", "\"0.3 um\""), centre()},
                 {}});
    s.push_back({Shape::square_well,
                 "V(x) = -depth for |x - centre| < half_width, 0 outside; softness s > 0: -depth (tanh((y + a)/s) - "
                 "tanh((y - a)/s))/2, y = x - centre, a = half_width",
                 {quantity("depth", Dimension::energy(), "0", "well depth", "\"20 h*kHz\""),
                  quantity("half_width", Dimension::length(), "required", "half the well's width (> 0)", "\"0.5 um\""),
                  quantity("softness", Dimension::length(), "0 um", "edge width s (>= 0; 0: sharp edges)", "\"0.05 um\""), centre()},
                 {}});
    s.push_back({Shape::power_walls,
                 "V(x) = height ((x - right)/width)^power for x > right, height ((left - x)/width)^power for x < "
                 "left, 0 between",
                 {quantity("left", Dimension::length(), "required", "position of the left wall", "\"-1 um\""),
                  quantity("right", Dimension::length(), "required", "position of the right wall (> left)", "\"1 um\""),
                  quantity("height", Dimension::energy(), "required", "wall energy one width beyond a wall (> 0)", "\"20 kB*uK\""),
                  quantity("width", Dimension::length(), "required", "wall width (> 0)", "\"0.1 um\""),
                  plain("power", "8", "steepness of the walls (> 0)", "6")},
                 {}});
    s.push_back({Shape::erf_walls,
                 "V(x) = (height/2) [erfc((right - x)/width) + erfc((x - left)/width)] (walls of finite height)",
                 {quantity("left", Dimension::length(), "required", "position of the left wall (half height)", "\"-1 um\""),
                  quantity("right", Dimension::length(), "required", "position of the right wall (> left)", "\"1 um\""),
                  quantity("height", Dimension::energy(), "required", "wall height (> 0)", "\"20 kB*uK\""),
                  quantity("width", Dimension::length(), "required", "distance over which a wall rises (> 0)", "\"0.1 um\"")},
                 {}});
    s.push_back({Shape::table,
                 "V(x) = scale T(x - centre), T the monotone cubic (Fritsch-Carlson) interpolation of the file's "
                 "(x, V) rows, constant beyond the first and last row",
                 {centre(), plain("scale", "1", "multiplies the tabulated values", "1.5")},
                 {text("file", "required",
                       "data file (relative to the scenario): rows of x and V, comma or space separated; one header "
                       "line may come first; '#' starts a comment",
                       "\"trap.csv\""),
                  text("x_unit", "required", "length unit of the x column", "\"um\""),
                  text("energy_unit", "required", "energy unit of the V column", "\"h*kHz\"")}});
    s.push_back({Shape::formula,
                 "V(x) = scale f(x - centre, t), f = expression in x (in x_unit), t (protocol time in time_unit), "
                 "the names of [potential.parameters] and muParser's functions (pi is _pi), in energy_unit",
                 {centre(), plain("scale", "1", "multiplies the expression (plain: in energy_unit)", "2")},
                 {text("expression", "required", "the formula f, e.g. \"a*x^2 + b*x^4\"", "\"0.5*x^2\""),
                  text("x_unit", "required", "length unit x is written in", "\"um\""),
                  text("energy_unit", "required", "energy unit of the expression's value", "\"h*kHz\""),
                  text("time_unit", "us", "time unit t is written in", "\"us\""),
                  sub("parameters", KeyType::table, "none",
                      "[potential.parameters]: named values of the expression, plain numbers in its units or "
                      "quantities with a unit (\"0.3 um\", \"2 h*kHz\"), converted to x_unit, energy_unit and "
                      "time_unit (frequencies: per time_unit, angular ones \"2pi*...\" in rad per time_unit); protocols and "
                      "sweeps change them as plain numbers in those units",
                      "{ a = 1 }")}});
    return s;
  }();
  return shapes;
}

const std::vector<TableSpec>& scenario_tables() {
  static const std::vector<TableSpec> tables = [] {
    const SpectrumOptions spectrum;
    const WorkRequest work;
    const SpectrumRequest grid;
    const SoftWallShape walls;
    std::vector<std::string> shapes;
    for (const auto& s : shape_specs()) shapes.emplace_back(shape_name(s.shape));
    std::vector<TableSpec> t;
    t.push_back({"top", "(top level)", "keys outside any table, and the tables a scenario may have",
                 {text("title", "none", "free text, printed in reports and summaries", "\"my trap\""),
                  text("description", "none", "free text", "\"what this scenario shows\""),
                  sub("particle", KeyType::table, "required", "[particle]"),
                  sub("units", KeyType::table, "none", "[units]"),
                  sub("potential", KeyType::tables, "required unless [box]", "[[potential]], one per term"),
                  sub("box", KeyType::table, "none", "[box]: hard walls"),
                  sub("spectrum", KeyType::table, "none", "[spectrum]"),
                  sub("grid", KeyType::table, "none", "[grid]"),
                  sub("output", KeyType::table, "none", "[output]"),
                  sub("protocol", KeyType::table, "none", "[protocol] (trapwork work, sweep)"),
                  sub("initial", KeyType::table, "none", "[initial] (trapwork work, sweep)"),
                  sub("work", KeyType::table, "none", "[work] (trapwork work, sweep)"),
                  sub("sweep", KeyType::table, "none", "[sweep] (trapwork sweep)"),
                  sub("noise", KeyType::table, "none", "[noise]: technical noise during the protocol (trapwork work)"),
                  sub("bath", KeyType::table, "none", "[bath]: damping toward a thermal bath during the protocol (trapwork work)"),
                  sub("uncertainty", KeyType::table, "none",
                      "[uncertainty]: the trap's calibration uncertainty, carried into work and sweep")}});
    t.push_back({"particle", "[particle]", "the trapped particle",
                 {quantity("mass", Dimension::mass(), "required",
                           "the particle's mass, always with its unit (u, Da, kg, g)", "\"40 u\"")}});
    t.push_back(
        {"units", "[units]", "the internal unit system (hbar = m = 1) and the display unit of energies",
         {quantity("reference_frequency", Dimension::frequency(),
                   "the first harmonic or polynomial frequency",
                   "sets the internal units: length sqrt(hbar/(m 2 pi f)), energy h f, always with its unit",
                   "\"1 MHz\""),
          quantity("length", Dimension::length(), "1 um (when no frequency sets the units)",
                   "internal length unit when no frequency sets it (boxes); not with a frequency", "\"2 um\""),
          text("energy", "h*kHz with a frequency, else kB*uK",
               "display unit of energies in tables: h*kHz, h*MHz, h*Hz, kB*uK, kB*nK, hbar*omega, natural, or another "
               "energy unit such as meV",
               "\"h*MHz\""),
          flag("natural", "false", "true: bare numbers for dimensional keys are internal values", "false")}});
    t.push_back({"potential", "[[potential]]",
                 "one term of the potential V(x) (the terms add); its shape decides the other keys "
                 "(potential.<shape>)",
                 {text("name", "term<N>", "the term's name, used in addresses such as trap.centre", "\"trap\""),
                  choice("shape", shapes, "required", "the term's shape")}});
    t.push_back({"box", "[box]", "hard walls: the grid's ends (a particle in a box, possibly with a potential inside)",
                 {quantity("left", Dimension::length(), "required", "position of the left wall", "\"0 um\""),
                  quantity("right", Dimension::length(), "required", "position of the right wall (> left)", "\"2 um\""),
                  sub("soft_walls", KeyType::table, "none",
                      "[box.soft_walls]: compare moving hard walls with soft ones",
                      "{ widths = [\"0.1 um\"], height = \"20 kB*uK\" }")}});
    t.push_back({"box.soft_walls", "[box.soft_walls]",
                 "soft power-law walls compared with moving hard walls (needs a protocol moving box.left or box.right)",
                 {array("widths", Dimension::length(), "required", "wall widths, widest first, each > 0", "[\"0.2 um\", \"0.1 um\"]"),
                  quantity("height", Dimension::energy(), "required", "wall height (> 0)", "\"20 kB*uK\""),
                  plain("power", number_text(walls.power), "steepness of the walls (> 0)", "6"),
                  whole("points", "spacing <= width/6 (at least 256)", "grid points of the soft runs", "512")}});
    t.push_back(
        {"grid", "[grid]", "the position grid (chosen automatically unless given)",
         {whole("points", "automatic", "number of grid points (4 to 2^24)", "512"),
          quantity("left", Dimension::length(), "automatic", "left end of an open grid (with right; not with [box])", "\"-2 um\""),
          quantity("right", Dimension::length(), "automatic", "right end of an open grid (with left)", "\"2 um\""),
          flag("convergence_check", grid.convergence_check ? "true" : "false",
               "repeat the spectrum on a finer, wider grid and report the change", "false"),
          quantity("search_half_width", Dimension::length(), number_text(grid.search_half_width) + " internal length units",
                   "how far from the first term's centre the automatic grid looks for the minimum and turning points",
                   "\"5 um\"")}});
    t.push_back({"spectrum", "[spectrum]", "the eigensolver",
                 {whole("levels", std::to_string(spectrum.levels), "number of lowest levels (1 to 100000)", "12"),
                  choice("method", {"auto", "dense", "lanczos", "finite_difference", "hermite"}, "auto",
                         "eigensolver (auto: dense up to " + std::to_string(spectrum.dense_limit) +
                             " points, else lanczos)"),
                  whole("fd_order", std::to_string(spectrum.fd_order),
                        "finite-difference order of lanczos and finite_difference: 2, 4, 6 or 8", "6"),
                  quantity("degeneracy", Dimension::energy(), number_text(spectrum.degeneracy_tolerance) + " internal energy units",
                           "levels closer than this form one degenerate group", "\"1e-6 h*kHz\"")}});
    t.push_back({"output", "[output]", "where results are written",
                 {text("folder", "<scenario file stem>-output", "output folder (the command's -o overrides it)",
                       "\"results\"")}});
    t.push_back({"protocol", "[protocol]", "the parameter changes over [0, duration] (trapwork work, sweep)",
                 {quantity("duration", Dimension::time(), "required", "tau (>= 0; \"0 us\" is a sudden switch)",
                           "\"2.5 us\""),
                  sub("change", KeyType::tables, "required", "[[protocol.change]], one per changed parameter")}});
    t.push_back(
        {"protocol.change", "[[protocol.change]]", "one parameter's schedule over the protocol",
         {text("parameter", "required",
               "the parameter changed: term.parameter (\"trap.centre\") or box.left / box.right", "\"trap.centre\""),
          choice("ramp", {"constant", "linear", "smooth", "smoother", "table", "formula"}, "linear",
                 "shape of the schedule from `from` to `to` (smooth, smoother: zero slope at the ends), held at `to` "
                 "(constant), a table file or a formula"),
          {"to", KeyType::quantity, std::nullopt, "required (constant, linear, smooth, smoother)", {},
           "end value, in the parameter's dimension (plain number for plain parameters)", "\"0.2 um\""},
          {"from", KeyType::quantity, std::nullopt, "the parameter's value in [[potential]] or [box]", {},
           "start value (linear, smooth, smoother)", "\"0 um\""},
          text("file", "required with ramp = \"table\"", "table file: rows of t and value", "\"ramp.csv\""),
          text("formula", "required with ramp = \"formula\"",
               "value as a formula of t and tau (in time_unit), pi and muParser's functions", "\"0.2*t/tau\""),
          text("time_unit", "required with table and formula", "time unit of the table or formula", "\"us\""),
          text("value_unit", "required with table and formula (not for plain parameters)",
               "unit of the table's or formula's values", "\"um\"")}});
    t.push_back(
        {"initial", "[initial]", "the initial state, exactly one of its keys (trapwork work, sweep)",
         {quantity("temperature", Dimension::temperature(), "exactly one of the four keys",
                   "thermal state at T (> 0; an energy such as \"1 kB*uK\" is taken as kB T)", "\"20 uK\""),
          plain("mean_phonons", "exactly one of the four keys",
                "thermal state with this mean phonon number of the harmonic reference frequency (> 0)", "2"),
          whole("level", "exactly one of the four keys", "the eigenstate with this index (0: ground state)", "0"),
          array("weights", std::nullopt, "exactly one of the four keys", "mixture of levels 0, 1, ... with these weights (>= 0)",
                "[1, 0.5]")}});
    t.push_back(
        {"work", "[work]", "the work calculation (trapwork work, sweep)",
         {choice("integrator", {"fourth_order", "strang", "eigenbasis"}, "fourth_order",
                 "time integrator: fourth-order or Strang split operator, or the instantaneous eigenbasis ODE"),
          whole("steps", std::to_string(work.steps) + " (automatic)", "time steps (0: from the energy range)", "400"),
          choice("frame", {"auto", "lab", "co_moving"}, "auto",
                 "co_moving: propagate in the frame moving with a rigidly translated trap (auto: when it is "
                 "one, unless m times its top speed passes half the grid's momentum range pi hbar/dx)"),
          plain("thermal_tolerance", number_text(work.thermal_tolerance),
                "thermal weight the kept initial levels may leave out (between 0 and 1)", "1e-8"),
          whole("max_initial_levels", std::to_string(work.max_initial_levels), "at most this many initial levels",
                "40"),
          whole("final_margin", std::to_string(work.final_margin),
                "final levels computed beyond the kept initial ones", "10"),
          quantity("resolution", Dimension::energy(), "1/20 of the lowest level spacing",
                   "energy-measurement resolution (sigma) used to broaden the work lines", "\"0.5 h*kHz\""),
          quantity("bin_width", Dimension::energy(), "the lowest level spacing", "histogram bin width of the work distribution",
                   "\"1 h*kHz\""),
          flag("reverse", work.reverse_run ? "true" : "false", "also run the reversed protocol (Crooks check)",
               "false"),
          flag("time_step_check", work.time_step_check ? "true" : "false", "repeat at half the time step and compare",
               "false"),
          whole("threads", "the machine's cores", "worker threads (results do not depend on it)", "2")}});
    t.push_back(
        {"sweep", "[sweep]",
         "one work run per value of one parameter, per point of a grid over several ([[sweep.axis]]) or per point "
         "of a list (parameters with values = [[...], ...]) (trapwork sweep)",
         {text("parameter", "one of parameter, [[sweep.axis]], parameters",
               "protocol.duration, initial.temperature, initial.mean_phonons, a potential parameter "
               "(\"trap.quartic\"), box.left / box.right, or change[N].to",
               "\"protocol.duration\""),
          array("values", std::nullopt, "required unless from, to and points",
                "the values, in the parameter's dimension, in the order run; with parameters: one array per point, "
                "one value per parameter", "[\"1 us\", \"2 us\"]"),
          {"from", KeyType::quantity, std::nullopt, "none (instead of values, with to and points)", {}, "first of evenly spaced values",
           "\"1 us\""},
          {"to", KeyType::quantity, std::nullopt, "none (instead of values, with from and points)", {}, "last of evenly spaced values",
           "\"3 us\""},
          whole("points", "none (instead of values, with from and to)", "number of evenly spaced values (2 to 100000)", "3"),
          array("parameters", std::nullopt, "none (a list of points: with values = [[...], ...])",
                "the parameters of a list of points, each named as in parameter", "[\"protocol.duration\", \"trap.quartic\"]"),
          sub("axis", KeyType::tables, "none (a grid: one table per parameter)",
              "[[sweep.axis]]: a full grid over the axes, the first axis varying slowest")}});
    t.push_back(
        {"sweep.axis", "[[sweep.axis]]", "one parameter of a grid sweep: its values as in the one-parameter [sweep]",
         {text("parameter", "required", "as [sweep] parameter", "\"initial.temperature\""),
          array("values", std::nullopt, "required unless from, to and points", "the axis's values, in the order run",
                "[\"1 uK\", \"2 uK\"]"),
          {"from", KeyType::quantity, std::nullopt, "none (instead of values, with to and points)", {}, "first of evenly spaced values",
           "\"1 us\""},
          {"to", KeyType::quantity, std::nullopt, "none (instead of values, with from and points)", {}, "last of evenly spaced values",
           "\"3 us\""},
          whole("points", "none (instead of values, with from and to)", "number of evenly spaced values (2 to 100000)", "3")}});
    t.push_back(
        {"noise", "[noise]",
         "technical noise on trap parameters during the protocol, averaged over noise realisations or by the "
         "Lindblad equation of white noise (trapwork work)",
         {choice("route", {"auto", "realisations", "lindblad"}, "auto",
                 "how the noise is averaged: noise traces one by one (any PSD), or the Lindblad master equation "
                 "(white noise only); auto: lindblad when all noise is white"),
          whole("realisations", "100", "noise traces propagated and averaged (2 to 1000000; realisations route)", "200"),
          whole("seed", "1", "seed of the noise traces (the same seed gives the same traces)", "2026"),
          quantity("standard_error", Dimension::energy(), "none (realisations as given)",
                   "statistical error asked for on <W>: realisations are added in batches (realisations the "
                   "first) until its standard error is at most this (realisations route)",
                   "\"0.5 h*kHz\""),
          whole("max_realisations", "10000", "most realisations standard_error or --tolerance may grow to (a "
                "warning gives the error reached when it stops them)", "2000"),
          sub("source", KeyType::tables, "required", "[[noise.source]], one per noisy parameter")}});
    t.push_back(
        {"noise.source", "[[noise.source]]",
         "one noisy parameter, with exactly one of white, psd_file, heating_rate (one-sided PSD per Hz)",
         {text("parameter", "required", "the noisy parameter of a [[potential]] term (\"trap.centre\")",
               "\"trap.centre\""),
          {"white", KeyType::quantity, std::nullopt, "one of white, psd_file, heating_rate", {},
           "white noise: one-sided PSD, the parameter's unit squared per Hz", "\"1e-22 m^2/Hz\""},
          text("psd_file", "one of white, psd_file, heating_rate", "table file of the one-sided PSD: rows of frequency and PSD",
               "\"psd.csv\""),
          text("frequency_unit", "Hz (with psd_file)", "unit of the PSD table's frequency column", "\"kHz\""),
          text("psd_unit", "required with psd_file", "unit of the PSD table's PSD column", "\"m^2/Hz\""),
          text("heating_rate", "one of white, psd_file, heating_rate",
               "measured heating rate of a centre, in quanta per time; taken as white position noise "
               "S_x = 4 hbar (dn/dt) / (m omega^3), which heats as f^3 (warned where the trap's frequency "
               "differs; electric-field noise heats as 1/f: give it as force noise on a linear term, in N^2/Hz)",
               "\"500 quanta/s\""),
          quantity("at_frequency", Dimension::frequency(), "required with heating_rate",
                   "trap frequency the heating rate was measured at", "\"1 MHz\""),
          flag("relative", "false",
               "white or psd_file is relative noise, eps/p in 1/Hz (intensity noise as RIN): the noise is p(t) eps_rel(t), "
               "p(t) the parameter's value at each time (absolute PSD S_rel p(t)^2)",
               "true")}});
    t.push_back(
        {"bath", "[bath]",
         "damping toward a thermal bath (e.g. laser cooling) during the protocol, Lindblad route only: jumps between "
         "the instantaneous levels n -> k at rate * |<k|x|n>|^2 / |<0|x|1>|^2 * (N + 1) down and * N up, "
         "N = 1/(exp((E_n - E_k)/kT) - 1) (detailed balance); the work lines become energy changes (work + heat)",
         {quantity("temperature", Dimension::temperature(), "one of temperature, mean_phonons",
                   "the bath's temperature (>= 0)", "\"0.5 mK\""),
          plain("mean_phonons", "one of temperature, mean_phonons",
                "the bath as its mean occupation (>= 0) at the initial lowest level spacing", "0.05"),
          text("rate", "required",
               "damping rate gamma per time (\"200 /s\", \"0.2 /ms\"; not Hz): for a harmonic trap "
               "d<n>/dt = -gamma (<n> - N); in any trap the zero-temperature decay rate of level 1 to level 0",
               "\"200 /s\"")}});
    t.push_back(
        {"uncertainty", "[uncertainty]",
         "the trap's calibration uncertainty, carried into `trapwork work` and `trapwork sweep` as a fit's covariance "
         "is (--uncertainty FILE; not both): <W>, sd(W), Delta F and the strong lines get the standard deviation it "
         "gives them; --uncertainty-method chooses linear propagation or sampling",
         {sub("sd", KeyType::table, "required",
              "one standard deviation per parameter, keyed by its address as protocols name it, in the parameter's "
              "lab unit (\"trap.frequency\" = \"0.4 kHz\"); the protocol must hold these parameters fixed",
              "{ \"trap.frequency\" = \"0.4 kHz\" }"),
          array("correlation", std::nullopt, "0 between every pair",
                "correlation coefficients of pairs of those parameters, [\"parameter\", \"parameter\", r] with "
                "-1 <= r <= 1; together a positive semi-definite matrix",
                "[[\"trap.frequency\", \"trap.quartic\", -0.6]]")}});
    return t;
  }();
  return tables;
}

const TableSpec& table_spec(std::string_view address) {
  for (const auto& t : scenario_tables())
    if (t.address == address) return t;
  throw ContractViolation("key reference: no table '" + std::string(address) + "'");
}

std::vector<std::string> table_keys(std::string_view address) {
  std::vector<std::string> out;
  for (const auto& k : table_spec(address).keys) out.push_back(k.name);
  return out;
}

const ShapeSpec& shape_spec(Shape s) {
  for (const auto& spec : shape_specs())
    if (spec.shape == s) return spec;
  throw ContractViolation("key reference: no shape");
}

std::vector<std::string> term_keys(Shape s) {
  std::vector<std::string> out = table_keys("potential");
  const ShapeSpec& spec = shape_spec(s);
  for (const auto& k : spec.parameters) out.push_back(k.name);
  for (const auto& k : spec.settings) out.push_back(k.name);
  return out;
}

const KeySpec* shape_parameter(Shape s, std::string_view name) {
  for (const auto& k : shape_spec(s).parameters)
    if (k.name == name) return &k;
  return nullptr;
}

std::vector<std::string> reference_addresses() {
  std::vector<std::string> out;
  for (const auto& t : scenario_tables()) {
    out.push_back(t.address);
    if (t.address == "potential")
      for (const auto& s : shape_specs()) out.push_back("potential." + std::string(shape_name(s.shape)));
  }
  return out;
}

std::string key_type_text(const KeySpec& k) {
  switch (k.type) {
    case KeyType::quantity:
      return k.dimension ? k.dimension->describe() + " with unit" : "the parameter's dimension";
    case KeyType::number: return "plain number";
    case KeyType::integer: return "integer";
    case KeyType::boolean: return "true/false";
    case KeyType::text: return "string";
    case KeyType::choice: {
      std::string list;
      for (const auto& c : k.choices) list += (list.empty() ? "" : ", ") + c;
      return "one of " + list;
    }
    case KeyType::array:
      return k.dimension ? "array of " + k.dimension->describe() + "s with unit" : "array";
    case KeyType::table: return "table";
    case KeyType::tables: return "array of tables";
  }
  return {};
}

namespace {

const char* const units_note =
    "Units: values carry their unit in quotes (\"40 u\", \"1 MHz\", \"2 um\", \"4 ms\", \"20 uK\", \"0.5 h*kHz\", "
    "\"3e-4 h*kHz/um^4\"); a bare number for a dimensional key is an error unless [units] natural = true. "
    "Frequencies are ordinary (f, in Hz); an angular frequency is written \"2pi*1.5 MHz\" (or \"9.42 rad/us\") and "
    "means f = 1.5 MHz; \"s^-1\" or \"1/s\" is refused as ambiguous.";

// Markdown table cells: '|' would end the cell.
std::string cell(std::string s) {
  std::string out;
  for (char c : s) out += c == '|' ? std::string("\\|") : std::string(1, c);
  return out;
}

void write_keys(std::ostream& out, const std::vector<KeySpec>& keys, bool markdown) {
  if (markdown) {
    out << "| key | type | default | meaning | example |\n|---|---|---|---|---|\n";
    for (const auto& k : keys)
      out << "| `" << k.name << "` | " << cell(key_type_text(k)) << " | " << cell(k.default_text) << " | "
          << cell(k.meaning) << " | " << (k.example.empty() ? "" : std::string("`").append(cell(k.example)).append("`")) << " |\n";
    return;
  }
  for (const auto& k : keys) {
    out << "  " << k.name << " (" << key_type_text(k) << "; "
        << (k.required() ? std::string("required") : "default: " + k.default_text) << ")\n";
    out << "      " << k.meaning;
    if (!k.example.empty()) out << "; e.g. " << k.name << " = " << k.example;
    out << "\n";
  }
}

void write_table(std::ostream& out, const TableSpec& t, bool markdown) {
  if (markdown) {
    std::string sentence = t.meaning;
    sentence[0] = char(std::toupper(static_cast<unsigned char>(sentence[0])));
    out << "## " << (t.address == "top" ? "Top level" : "`" + t.header + "`") << "\n\n" << sentence << ".\n\n";
  }
  else
    out << t.header << " -- " << t.meaning << (t.address == "top" ? "" : " (trapwork keys " + t.address + ")") << "\n";
  write_keys(out, t.keys, markdown);
  out << "\n";
}

void write_shape(std::ostream& out, const ShapeSpec& s, bool markdown) {
  const std::string name(shape_name(s.shape));
  if (markdown)
    out << "### `shape = \"" << name << "\"` (potential." << name << ")\n\n`" << s.formula << "`\n\n";
  else
    out << "[[potential]] shape = \"" << name << "\" (trapwork keys potential." << name << ")\n  " << s.formula << "\n";
  std::vector<KeySpec> keys = s.parameters;
  keys.insert(keys.end(), s.settings.begin(), s.settings.end());
  write_keys(out, keys, markdown);
  out << "\n";
}

}  // namespace

std::string keys_text(std::string_view address_in, bool markdown) {
  std::string address(address_in);
  if (shape_from_name(address)) address = "potential." + address;
  std::ostringstream out;
  if (address.empty()) {
    if (markdown)
      out << "# Scenario keys\n\nGenerated by `trapwork keys --markdown` from the reader's own key reference "
             "(solver/scenario/keys.cpp); do not edit by hand.\n\n"
          << units_note << "\n\n";
    else
      out << units_note << "\n\n";
    for (const auto& t : scenario_tables()) {
      write_table(out, t, markdown);
      if (t.address == "potential")
        for (const auto& s : shape_specs()) write_shape(out, s, markdown);
    }
    return out.str();
  }
  for (const auto& t : scenario_tables())
    if (t.address == address) {
      write_table(out, t, markdown);
      return out.str();
    }
  for (const auto& s : shape_specs())
    if ("potential." + std::string(shape_name(s.shape)) == address) {
      write_shape(out, s, markdown);
      return out.str();
    }
  const auto known = reference_addresses();
  std::string list;
  for (const auto& k : known) list += (list.empty() ? "" : ", ") + k;
  throw InputError("TABLE", std::string(address_in), "a table or shape of the key reference: " + list,
                   closest_name(address, known, 3));
}

}  // namespace trapwork
