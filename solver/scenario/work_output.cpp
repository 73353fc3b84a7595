// Output files, summary and report of `trapwork work` and `trapwork sweep` (see work_output.hpp).
#include "solver/scenario/work_output.hpp"

#include <algorithm>
#include <cctype>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <limits>
#include <numeric>
#include <optional>

#include "solver/errors.hpp"
#include "solver/harmonic_reference.hpp"
#include "solver/scenario/machine.hpp"
#include "solver/scenario/plot.hpp"
#include "solver/scenario/tasks.hpp"

namespace trapwork {

namespace fs = std::filesystem;
using json = nlohmann::ordered_json;

namespace {

constexpr double nan_value = std::numeric_limits<double>::quiet_NaN();
constexpr double inf_value = std::numeric_limits<double>::infinity();

json number_or_null(double v) {
  return std::isfinite(v) ? json(v) : json(nullptr);
}

// Energies for humans: the display unit, and hbar*omega_ref where the scenario has one.
struct Energies {
  Display d;
  double omega_ref;  // internal; 0 without a reference frequency
  explicit Energies(const Scenario& s) : d(display(s)), omega_ref(s.omega_ref) {}
  bool oscillator() const { return omega_ref > 0 && d.e != "hbar*omega"; }
  double show(double internal) const { return d.energy(internal); }
  std::string text(double internal, int digits = 6) const {
    std::string t = short_number(d.energy(internal), digits) + " " + d.e;
    if (oscillator()) t += " (" + short_number(internal / omega_ref, digits) + " hbar*omega)";
    return t;
  }
};

// Why a run has no harmonic reference, for the comment of a column left empty.
std::string harmonic_absence(const WorkRun& run) {
  const std::string& why = run.result.harmonic_absent;
  return "no harmonic reference (" + (why.empty() ? std::string("not applicable to moving walls") : why) + ")";
}

// Lengths in nm for traps narrower than 2 um, else in um.
struct LengthUnit {
  std::string name;
  double internal_per_unit;
};
LengthUnit length_unit(const Scenario& s, const Grid& g) {
  const double um = internal_per_um(s);
  return g.length() < 2 * um ? LengthUnit{"nm", um / 1000} : LengthUnit{"um", um};
}

// 100 diff / reference, or NaN where the reference is 0 to rounding (below 1e-12 of the
// lowest spacing: a constant-speed translation over whole periods has <W>_harm = 0).
double departure_percent(double diff, double reference, double spacing) {
  return std::abs(reference) > 1e-12 * std::abs(spacing) ? 100 * diff / reference : nan_value;
}

// A scheduled value in lab units, by dimension.
std::string lab_text(const Scenario& s, double internal, const Dimension& d) {
  const UnitSystem& u = s.units;
  if (d == Dimension::energy()) return Energies(s).text(internal);
  if (d == Dimension::length() || d == Dimension::frequency() || d == Dimension::time())
    return trapwork::lab_text(u.to_si(internal, d), d);
  if (d == Dimension::none()) return short_number(internal);
  return short_number(u.to_si(internal, d)) + " " + si_unit(d);
}

double duration_us(const Scenario& s, double tau) {
  return conversion_rounded(s.units.to_si(tau, Dimension::time()) * 1e6);
}

// A duration in the unit the scenario's protocol.duration was written in ("4 ms", not
// "4000 us"); a bare (natural) duration in a lab unit chosen by its size.
std::string duration_text(const Scenario& s, double tau) {
  return MessageUnits{s.units, s.energy, duration_unit(s)}(tau, Dimension::time());
}

// The given text of a potential parameter ("trap.centre"), or its lab value.
std::string potential_value_text(const Scenario& s, const ChangeSpec& c) {
  const auto dot = c.parameter.find('.');
  const std::string term = c.parameter.substr(0, dot), name = c.parameter.substr(dot + 1);
  for (const auto& t : s.terms)
    if (t.name == term)
      for (const auto& p : t.parameters)
        if (p.name == name) return p.given;
  return lab_text(s, parameter_value(s, c.parameter), c.dimension);
}

std::string unquoted(const std::string& text) {
  return text.size() >= 2 && text.front() == '"' ? text.substr(1, text.size() - 2) : text;
}

std::string change_text(const Scenario& s, const ChangeSpec& c) {
  std::string from = c.from ? c.from_given : potential_value_text(s, c);
  // A start taken from the potential at exactly 0 reads in the unit of the end value
  // ("from 0 nm to 160 nm", not "from 0 m").
  const std::string to = unquoted(c.to_given);
  if (!c.from && parameter_value(s, c.parameter) == 0 && to.find(' ') != std::string::npos)
    from = "0" + to.substr(to.find(' '));
  switch (c.form) {
    case ScheduleForm::constant: return c.parameter + " held at " + unquoted(c.to_given);
    case ScheduleForm::table:
      return c.parameter + ": table " + c.file + " (" + std::to_string(c.times.size()) + " rows, t in " +
             c.time_unit + (c.value_unit.empty() ? "" : ", value in " + c.value_unit) +
             (c.file_skipped.empty() ? "" : "; skipped " + c.file_skipped) + ")";
    case ScheduleForm::formula:
      return c.parameter + " = " + c.formula + " (t in " + c.time_unit +
             (c.value_unit.empty() ? "" : ", value in " + c.value_unit) + ")";
    default: break;
  }
  // A bare number (natural units) is shown with its lab value beside it.
  auto shown = [&](const std::string& text, double internal) {
    const std::string t = unquoted(text);
    if (c.dimension == Dimension::none() || t.find(' ') != std::string::npos) return t;
    return t + " (" + lab_text(s, internal, c.dimension) + ")";
  };
  return c.parameter + ": " + c.ramp + " ramp from " + shown(from, c.from ? *c.from : parameter_value(s, c.parameter)) +
         " to " + shown(c.to_given, c.to);
}

// Gibbs states: temperature in uK and nbar against the lowest spacing of H_A.
struct Thermal {
  bool gibbs = false;
  double beta = nan_value, temperature_uK = nan_value, mean_phonons = nan_value;
};
Thermal thermal_of(const WorkRun& run) {
  Thermal t;
  const double beta = run.result.distribution.beta;
  if (!std::isfinite(beta)) return t;
  t.gibbs = true;
  t.beta = beta;
  t.temperature_uK = conversion_rounded(run.scenario.units.energy_J() / (beta * si::boltzmann) * 1e6);
  t.mean_phonons = 1 / std::expm1(beta * lowest_spacing(run.result));
  return t;
}

std::string initial_text(const WorkRun& run) {
  const Thermal t = thermal_of(run);
  const std::string given = run.scenario.work ? run.scenario.work->initial_given : "";
  if (!t.gibbs) {
    const InitialState& s = run.request.initial;
    if (s.kind() == InitialState::Kind::eigenstate) return given + ": level " + std::to_string(s.level()) + " of H_A";
    return given + ": a mixture of the lowest " + std::to_string(s.mixture_weights().size()) + " levels of H_A";
  }
  return given + ": Gibbs state, T = " + trapwork::lab_text(t.temperature_uK * 1e-6, Dimension::temperature(), 4) +
         ", nbar = " +
         short_number(t.mean_phonons, 4) + " (against the lowest spacing " +
         Energies(run.scenario).text(lowest_spacing(run.result), 5) + ")";
}

double time_step_ns(const WorkRun& run) {
  return run.result.steps > 0
             ? run.scenario.units.to_si(run.protocol.duration() / run.result.steps, Dimension::time()) * 1e9
             : nan_value;
}

// The displacement of a co-moving run's frame at tau (the final spectrum lives at x + d).
double frame_shift(const WorkRun& run) {
  if (!run.result.co_moving) return 0;
  const auto tr = run.protocol.translation(run.scenario.potential);
  return tr ? run.protocol.displacement(*tr, run.protocol.duration()).value : 0.0;
}

// Points for the broadened densities: the lines holding all but 1e-6 of the largest line's
// probability, widened by 6 sigma, at sigma / 5 (at most 4001 points).
std::vector<double> density_grid(const WorkDistribution& d, double sigma) {
  double top = 0;
  for (const auto& l : d.lines) top = std::max(top, l.probability);
  double lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (const auto& l : d.lines)
    if (l.probability >= 1e-6 * top) {
      lo = std::min(lo, l.work);
      hi = std::max(hi, l.work);
    }
  if (!(hi >= lo)) return {};
  lo -= 6 * sigma;
  hi += 6 * sigma;
  const std::size_t n = std::min<std::size_t>(4001, std::size_t(std::ceil((hi - lo) / (sigma / 5))) + 1);
  std::vector<double> w(n);
  for (std::size_t i = 0; i < n; ++i) w[i] = lo + (hi - lo) * double(i) / double(n - 1);
  return w;
}

double sd_of(const WorkDistribution& d) {
  return std::sqrt(std::max(0.0, d.variance));
}

// Error of sd W from the error dv of var W: |sqrt(v + dv) - sqrt(v)| <= min(dv / sqrt(v), sqrt(dv)).
// NaN where the variance error is not known.
double sd_error_of(const WorkDistribution& d, const MomentErrors& m) {
  const double sd = sd_of(d), dv = m.reported_variance_error();
  if (!std::isfinite(dv)) return nan_value;
  return sd > 0 ? std::min(dv / sd, std::sqrt(dv)) : std::sqrt(dv);
}

}  // namespace

ScenarioWork compute_work(const Scenario& s, WorkRequest request) {
  if (!(request.spectrum.options.memory_limit > 0)) request.spectrum.options.memory_limit = available_memory_bytes();
  ScenarioWork w{build_protocol(s), std::move(request), std::nullopt, std::nullopt, {}};
  if (moves_walls(s)) {
    const WallProtocol walls = build_wall_protocol(s);
    WallWorkRequest wr = wall_work_request(s, w.request);  // the request as passed (steps, points)
    const auto& report = w.request.progress;  // the hard-wall run, then the soft-wall runs (if any)
    const double hard_share = s.soft_walls ? 0.5 : 1.0;
    if (report) wr.progress = [&report, hard_share](double f) { report(hard_share * f); };
    wr.spectrum.memory_limit = w.request.spectrum.options.memory_limit;
    w.walls = run_wall_work(walls, wr);
    if (s.soft_walls) {
      SoftWallRequest soft = *s.soft_walls;
      if (report) soft.progress = [&report](double f) { report(0.5 + 0.5 * f); };
      w.soft_walls = compare_soft_walls(walls, *w.walls, wr, soft);
    }
  } else
    w.plain = run_work(s.potential, w.protocol, w.request);
  return w;
}

namespace {
double transform_arithmetic(double n) { return 10 * n * std::log2(std::max(2.0, n)) + 30 * n; }
}  // namespace

double run_arithmetic(const WorkResult& r) {
  if (r.diagnostics.ode_arithmetic > 0) return r.diagnostics.ode_arithmetic * (r.reverse ? 2 : 1);
  const double substeps = r.method.find("order 4") != std::string::npos ? 3 : 1;
  const double columns = double(std::max<std::size_t>(1, r.forward.initial_weights.size()));
  return double(std::max(1, r.steps)) * substeps * columns * transform_arithmetic(double(r.grid.size())) *
         (r.reverse ? 2 : 1);
}

namespace {
// The scenario on 3/2 the points of the run's grid, over the same extent (a box keeps its
// walls); where the run's final states reach the grid's edge (the edge-amplitude warning's
// threshold, 1e-8), over 5/4 the extent about its centre at 3/2 the density, so that the pair's
// distance measures the extent too (a fast squeeze of a trap reaches beyond the instantaneous
// eigenstates the grid was chosen for).
Scenario on_finer_grid(const Scenario& s, const WorkResult& r) {
  const Grid& g = r.grid;
  Scenario finer = s;
  if (g.boundary() == Boundary::hard_wall) {
    finer.spectrum.points = fast_fft_size(3 * (g.size() + 1) / 2) - 1;
  } else if (!finer.spectrum.box) {
    const bool widen = r.diagnostics.edge_amplitude > 1e-8;
    const double centre = (g.left() + g.right()) / 2,
                 half = (widen ? 1.25 : 1.0) * (g.right() - g.left()) / 2;
    finer.spectrum.points =
        fast_fft_size(std::size_t(std::ceil((widen ? 1.25 : 1.0) * 3 * double(g.size()) / 2)));
    finer.spectrum.extent = std::make_pair(centre - half, centre + half);
  } else {
    finer.spectrum.points = fast_fft_size(3 * g.size() / 2);
  }
  return finer;
}
}  // namespace

WorkRequest ode_check_request(WorkRequest e, const WorkResult& first, double tolerance) {
  e.reverse_run = false;
  e.ode = {tolerance / 500, tolerance / 500};
  e.steps = 2 * first.steps;
  e.eigenbasis_levels = std::max(1, (2 * first.diagnostics.ode_basis_levels + 2) / 3);
  return e;
}

namespace {
// How a stopped eigenbasis ODE run passed its budget, for the search's trail.
std::string what_passed(const ArithmeticLimitReached& stop) {
  if (stop.basis) return "basis spectrum's estimated arithmetic alone would pass ";
  return stop.projected ? "estimated arithmetic, projected from the protocol's first part, passed twice "
                        : "estimated arithmetic passed ";
}
}  // namespace

ToleranceChoice compute_work_to_tolerance(const Scenario& s, WorkRequest request, double tolerance,
                                          double cost_bound) {
  ToleranceChoice c;
  c.tolerance = tolerance;
  c.scenario = s;
  c.cost_bound = cost_bound;
  request.time_step_check = false;  // the refinements below are the checks
  double last_seconds = 0;
  // How far the direct moments moved within the pairs that verified the choice (see
  // MomentErrors::mean_discretisation): the grid pair's, the step pair's (scaled as its line
  // distance is) and the ODE's check pair's; NaN until measured.
  DirectMoments grid_shift{nan_value, nan_value}, step_shift{nan_value, nan_value};
  auto shift = [](const ScenarioWork& a, const ScenarioWork& b, double factor = 1.0) {
    const MomentErrors &x = a.result().diagnostics.moments, &y = b.result().diagnostics.moments;
    return DirectMoments{factor * std::abs(x.mean_direct - y.mean_direct),
                         factor * std::abs(x.variance_direct - y.variance_direct)};
  };
  // The chosen run's discretisation part: the sum of the parts measured (NaN if one is not).
  auto discretisation = [](ScenarioWork& w, DirectMoments a, DirectMoments b, const std::string& from) {
    MomentErrors& m = w.result().diagnostics.moments;
    m.mean_discretisation = a.mean + b.mean;
    m.variance_discretisation = a.variance + b.variance;
    m.discretisation_from = from;
  };
  const auto memo = std::make_shared<SpectrumMemo>();  // runs on one grid share their spectra
  // Cost: every run's estimated arithmetic is added to c.cost_spent (in units of the first
  // run's); a run that would take the total past the bound is not started. request.progress
  // (if any) reports the share of the bound used.
  const std::function<void(double)> report = request.progress;
  request.progress = nullptr;
  double unit = 0, predicted = 0;
  auto fits = [&](const WorkResult& from, int steps, std::size_t points) {
    predicted = run_arithmetic(from) / unit * double(std::max(1, steps)) / double(std::max(1, from.steps)) *
                transform_arithmetic(double(points)) / transform_arithmetic(double(from.grid.size()));
    if (c.cost_spent + predicted <= c.cost_bound) return true;
    c.bound_reached = true;
    return false;
  };
  // checked = false: no finer-grid check of the spectra (for the refined runs, whose
  // comparison with the coarser grid is the check)
  auto run = [&](const Scenario& sc, WorkRequest r, bool checked = true) {
    r.spectrum = work_request(sc).spectrum;  // the grid of this scenario
    r.spectrum.options.memo = memo;
    r.spectrum.convergence_check = r.spectrum.convergence_check && checked;
    r.grid_check = r.grid_check && checked;
    if (report && unit > 0)
      r.progress = [&, spent = c.cost_spent, share = predicted](double f) {
        report(std::min(1.0, (spent + f * share) / c.cost_bound));
      };
    const auto start = std::chrono::steady_clock::now();
    ScenarioWork w = compute_work(sc, r);
    last_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    if (unit == 0) unit = run_arithmetic(w.result());
    c.cost_spent += run_arithmetic(w.result()) / unit;
    if (report) report(std::min(1.0, c.cost_spent / c.cost_bound));
    const std::string points = std::to_string(w.result().grid.size()) + " points (" + short_number(last_seconds, 2) + " s)";
    if (r.integrator == Integrator::eigenbasis)
      c.trail.push_back("eigenbasis ODE at tolerance " + short_number(r.ode.absolute, 2) + ", " +
                        std::to_string(w.result().diagnostics.ode_basis_levels) + " basis levels, " + points);
    else
      c.trail.push_back(std::to_string(w.result().steps) + " steps, " + points);
    return w;
  };
  // The start: 1/16 of the automatic count (phases of 3.2 rad per order-4 step: the automatic
  // step aims at accuracy everywhere, far beyond a loose T), whatever the scenario's [work]
  // steps: the search chooses the steps. The grid is varied first at these steps, then the
  // steps on the chosen grid. Only the runs that may be chosen run the reverse
  // protocol (line_distance compares the forward runs).
  const int given_steps = request.steps;
  request.steps = 0;
  // The order is the search's to choose, as the steps are: a Strang scenario is searched with
  // the order-4 triple jump (the same symmetric splitting, its error falling as dt^4). On the
  // benchmark's reference job the best order-4 runs met T = 1e-6 and 1e-8 with a third of the
  // substeps of the Strang runs the search chose (README, case (g)).
  const bool strang_replaced = request.integrator == Integrator::strang;
  if (strang_replaced) request.integrator = Integrator::fourth_order;
  if (request.phase_per_step == 0) request.phase_per_step = 3.2;  // per order-4 step (the ODE ignores it)
  const bool reverse = request.reverse_run;
  request.reverse_run = false;
  // The eigenbasis ODE first (ode_first, see work_output.hpp), where it applies; a win returns here.
  auto tried = std::chrono::steady_clock::now();  // when the running ODE try started
  double ode_first_limit = 0;  // its first run's budget (operations per direction; 0: not tried)
  std::size_t ode_first_points = 0;  // the grid of its first run, when it ran to the end
  constexpr double ode_operation_cost = 2.5;  // see the eigenbasis ODE after the search, below
  // (Not with a cost bound below 4 units: its two runs may take up to about 1.4 of them.)
  if (s.protocol && s.protocol->duration > 0 && !moves_walls(s) && cost_bound >= 4) {
    // The coarse split-operator run's estimated operations, from run_work's estimate before it
    // propagates (its spectra, solved by then, stay in the memo for the runs below).
    struct Sized {};
    double coarse_operations = 0;
    WorkRequest dry = request;
    dry.spectrum = work_request(c.scenario).spectrum;
    dry.spectrum.options.memo = memo;
    dry.on_estimate = [&coarse_operations](const CostEstimate& e) {
      coarse_operations = e.operations;
      throw Sized{};
    };
    try {
      (void)compute_work(c.scenario, dry);
    } catch (const Sized&) {
    }
    if (coarse_operations > 0) {
      // cost units until the coarse split-operator run has run: its estimate (then its own arithmetic)
      unit = coarse_operations;
      WorkRequest e = request;
      e.reverse_run = reverse;
      e.integrator = Integrator::eigenbasis;
      e.steps = 0;
      e.ode = {tolerance / 50, tolerance / 50};
      // A quarter of the coarse run's estimate (which counts the most initial levels the run may
      // keep, often 1.5 times what it keeps); a slow move's ODE needs far less (0.05 of it at
      // 25 us). The ODE's own preliminaries (its basis of twice the levels) are not counted: a
      // try that loses cost the built-in move at 2.5 us 0.24 s with this budget, 0.34 s with the
      // whole estimate, against 0.32 s for the coarse run and 0.32 s for the later try it
      // replaces (measured): the ODE is not tried again after the split-operator search where
      // this try ran.
      e.ode_arithmetic_limit = ode_first_limit = coarse_operations / ode_operation_cost / 4;
      tried = std::chrono::steady_clock::now();
      try {
        ScenarioWork basis = run(c.scenario, e);
        const double seconds = last_seconds;
        ode_first_points = basis.result().grid.size();
        // The check (ode_check_request) on 3/2 the points over the same extent (wider where the
        // states reached its edge: on_finer_grid), so that its distance bounds the grid's, the
        // ODE's and the basis's parts of the first run's error together.
        const Grid& g = basis.result().grid;
        const Scenario finer = on_finer_grid(c.scenario, basis.result());
        e = ode_check_request(e, basis.result(), tolerance);
        e.ode_arithmetic_limit = 6 * basis.result().diagnostics.ode_arithmetic;
        const ScenarioWork check = run(finer, e, false);
        const LineDistance distance = line_distance(basis.result().forward, check.result().forward);
        const double d = distance.distance;
        c.trail.back() += ": distance to the first ODE run " + short_number(d, 3);
        if (d <= tolerance) {
          c.max_work_shift = distance.max_work_shift;
          c.ode_first = true;
          c.ode_part = d;
          c.grid_part = c.time_step_part = nan_value;
          c.time_step_rule = "not measured: the eigenbasis ODE was chosen first";
          c.eigenbasis_seconds = seconds;
          c.split_seconds = nan_value;
          c.ode_cost_ratio = basis.result().diagnostics.ode_arithmetic / coarse_operations;
          c.steps = basis.result().steps;
          c.points = g.size();
          c.method = basis.result().method;
          // The chosen run alone with its usual check (run_work's time_step_check: the forward
          // run again at twice the restart points and 1/100 the tolerances), that check counted
          // at the forward run's arithmetic, which it takes at least
          c.chosen_cost = run_arithmetic(basis.result()) * (1 + (basis.result().reverse ? 0.5 : 1.0)) / unit;
          if (given_steps > 0)
            c.trail.front() += " (the scenario's " + std::to_string(given_steps) + " steps do not apply: the ODE "
                               "chooses its own)";
          discretisation(basis, shift(basis, check), {0, 0},
                         "the --tolerance search's check of the eigenbasis ODE on 3/2 the points");
          c.work = std::move(basis);
          c.work->request.spectrum.options.memo.reset();  // the returned request solves afresh
          c.scenario.spectrum.points = c.points;
          return c;
        }
      } catch (const ArithmeticLimitReached& stop) {
        c.ode_stopped = true;
        c.cost_spent += stop.spent / unit;  // what it used before it stopped
        c.trail.push_back("eigenbasis ODE first (tolerance " + short_number(tolerance / 50, 2) + "): stopped when its " +
                          what_passed(stop) + "a quarter of the coarse split-operator run's (" +
                          short_number(std::chrono::duration<double>(std::chrono::steady_clock::now() - tried).count(), 2) +
                          " s)");
      }
    }
  }
  ScenarioWork coarse = run(c.scenario, request);
  if (ode_first_limit > 0) {  // the ODE's try was counted in units of the estimate: now the run's own
    const double actual = run_arithmetic(coarse.result());
    c.cost_spent *= unit / actual;
    unit = actual;
  }
  if (given_steps > 0)
    c.trail.back() += " (the scenario's " + std::to_string(given_steps) + " steps are replaced: the search chooses them)";
  if (strang_replaced)
    c.trail.back() += " (order 4 instead of the scenario's Strang: the search chooses the order)";
  double coarse_seconds = last_seconds;
  request.steps = coarse.result().steps;  // the same steps on every grid below
  // Grid: refine by 3/2 until two grids agree to T/2; the coarser of the two is kept (grid
  // errors fall off exponentially, so their distance is the coarser run's own error estimate).
  // Measured at the coarse steps: the grid's part of the error hardly depends on the step.
  c.grid_part = nan_value;  // not verified until two grids were compared
  for (int k = 0; k < 3; ++k) {
    Scenario finer = on_finer_grid(c.scenario, coarse.result());
    if (!fits(coarse.result(), coarse.result().steps, *finer.spectrum.points)) break;
    ScenarioWork fine = run(finer, request, false);
    const LineDistance d = line_distance(coarse.result().forward, fine.result().forward);
    c.grid_part = d.distance;
    grid_shift = shift(coarse, fine);
    c.max_work_shift = d.max_work_shift;
    c.trail.back() += (coarse.result().diagnostics.edge_amplitude > 1e-8
                           ? " over 5/4 the extent (the coarser run's states reached its edge)"
                           : std::string()) +
                      ": distance to the coarser grid " + short_number(c.grid_part, 3);
    if (c.grid_part <= tolerance / 2) break;
    c.scenario = std::move(finer);
    coarse = std::move(fine);
    coarse_seconds = last_seconds;
  }
  // Steps, by Richardson's rule (the error of an order-p method falls as N^-p; common practice):
  // a pair of runs at N and r N steps differing by d puts the finer run's error at
  // d / (r^p - 1). From the pair (N0, 2 N0) the steps for T/4 are predicted and run; the finer
  // run of the last pair is kept, accepted when
  //   - its distance to the coarser run is within T/2 (then that distance, which bounds the
  //     coarser run's error, is its estimate: no assumption about the order), or
  //   - its Richardson estimate is within T/2 and the pair's distance is at most twice what the
  //     previous pair predicted for it (the runs are in the range where the error falls as N^-p).
  // Otherwise the next pair is predicted from the last (at least 1.5 times the steps, at most 16
  // times). Every run must have the steps asked for (a run that ignored them would make this
  // loop endless).
  auto expect_steps = [&](const ScenarioWork& w) {
    TRAPWORK_EXPECT(w.result().steps == request.steps,
                    "--tolerance search: the run did not take the steps it was given (" +
                        std::to_string(w.result().steps) + " for " + std::to_string(request.steps) + ")");
  };
  request.reverse_run = reverse;
  if (coarse.result().steps > 0) {  // a sudden switch has no steps
    const double order = coarse.result().method.find("order 4") != std::string::npos ? 4 : 2;
    c.time_step_part = nan_value;  // not verified until two step counts were compared
    double predicted_distance = nan_value;  // of the next pair, from the last one
    double last_distance = nan_value;
    bool verified = false;
    for (int k = 0; k < 8; ++k) {
      const int base = coarse.result().steps;
      if (k == 0) {
        request.steps = 2 * base;
      } else {
        const double estimate = c.time_step_part;  // of the current (finer) run
        const double grow = std::clamp(std::pow(estimate / (tolerance / 4), 1 / order), 1.5, 16.0);
        request.steps = int(std::ceil(grow * base));
      }
      if (!fits(coarse.result(), request.steps, coarse.result().grid.size())) break;
      ScenarioWork fine = run(c.scenario, request);
      expect_steps(fine);
      const double d = line_distance(coarse.result().forward, fine.result().forward).distance;
      const double ratio = double(fine.result().steps) / base;
      const double richardson = d / (std::pow(ratio, order) - 1);
      const bool asymptotic = std::isfinite(predicted_distance) && d <= 2 * predicted_distance + 1e-14;
      c.trail.back() += ": distance to " + std::to_string(base) + " steps " + short_number(d, 3);
      const DirectMoments moved = shift(coarse, fine);
      coarse = std::move(fine);
      coarse_seconds = last_seconds;
      last_distance = d;
      step_shift = moved;  // the shift bounds the coarser run's error, whatever the order
      if (d <= tolerance / 2) {
        c.time_step_part = d;
        c.time_step_rule = "the distance to the coarser run";
        verified = true;
        break;
      }
      c.time_step_part = richardson;
      c.time_step_rule = "Richardson's rule, order " + std::to_string(int(order));
      if (asymptotic && richardson <= tolerance / 2) {
        // Richardson's estimate, doubled as run_work doubles its half-step shift (the estimate
        // alone was 0.30 h*kHz for a true 0.2987 on a fast harmonic squeeze: right, no room)
        const double f = 2 / (std::pow(ratio, order) - 1);
        step_shift = {f * moved.mean, f * moved.variance};
        verified = true;
        break;
      }
      // what the next pair should show if the error falls as N^-p: the current run's error less
      // the next run's (predicted below from the same estimate)
      const double next_grow = std::clamp(std::pow(richardson / (tolerance / 4), 1 / order), 1.5, 16.0);
      predicted_distance = richardson * (1 - std::pow(next_grow, -order));
    }
    // stopped unverified (8 pairs, or the cost bound): the last pair's distance, which bounds
    // the coarser run's error, stands in for an estimate the pairs did not confirm
    if (!verified && std::isfinite(last_distance)) {
      c.time_step_part = std::max(last_distance, c.time_step_part);
      c.time_step_rule = "the distance to the coarser run (not verified within T/2)";
    }
    request.steps = coarse.result().steps;
  }
  c.split_seconds = coarse_seconds;
  c.steps = coarse.result().steps;
  c.points = coarse.result().grid.size();
  c.method = coarse.result().method;
  // The chosen run alone with its usual checks: itself and the half-step run (two forward runs)
  {
    const WorkResult& r = coarse.result();
    const double all = run_arithmetic(r) / unit, forward = all / (r.reverse ? 2 : 1);
    c.chosen_cost = all + (r.steps > 0 ? 2 * forward : 0);
  }
  // The eigenbasis ODE, where it applies, within what is left of 1.5 times chosen_cost: a third
  // for its first run, the rest for its check. Its estimated operations take about
  // ode_operation_cost times as long as the split-operator run's (steps x substeps x columns x
  // (two FFTs, 5 n log2 n each, and 30 n for the phases)): measured here 2.2 (built-in scenario
  // at T = 1e-8: 0.35 s against 0.94 s at 0.17 of the arithmetic), 3 (at 1e-5) and 4.2 (the
  // benchmark job: 33 s against 3.4 s at 2.3); so it is charged at that factor, and its first run
  // stops at half the split-operator run's time so estimated: it is chosen only where it is
  // clearly faster. Limits are per direction (forward, reverse), in operations.
  const WorkResult& split = coarse.result();
  const double left = (1.5 * c.chosen_cost - c.cost_spent) * unit;  // operations
  const double directions = split.reverse ? 2 : 1;
  if (split.steps > 0 && !moves_walls(s) && !c.bound_reached) {
    const double n = double(split.grid.size()), columns = double(split.forward.initial_weights.size());
    const double substeps = split.method.find("order 4") != std::string::npos ? 3 : 1;
    const double split_arithmetic = double(split.steps) * substeps * columns * (10 * n * std::log2(n) + 30 * n);
    WorkRequest e = request;
    e.integrator = Integrator::eigenbasis;
    e.steps = 0;
    e.ode = {tolerance / 50, tolerance / 50};
    e.ode_arithmetic_limit = std::min(split_arithmetic / 2, left / 3 / directions) / ode_operation_cost;
    if (ode_first_limit > 0 && (c.ode_stopped || ode_first_points == split.grid.size())) {
      c.trail.push_back(c.ode_stopped ? "eigenbasis ODE not tried again: its first try was stopped by its budget"
                                      : "eigenbasis ODE not tried again: its first try on this grid missed the tolerance");
    } else if (e.ode_arithmetic_limit * ode_operation_cost < split_arithmetic / 20) {
      c.trail.push_back("eigenbasis ODE not tried: " + short_number(std::max(0.0, left / unit), 2) +
                        " units of arithmetic left within 1.5 times the chosen run with its checks");
    } else
    try {
      tried = std::chrono::steady_clock::now();
      ScenarioWork basis = run(c.scenario, e);
      const double seconds = last_seconds;
      c.ode_cost_ratio = basis.result().diagnostics.ode_arithmetic / split_arithmetic;
      e = ode_check_request(e, basis.result(), tolerance);
      e.ode_arithmetic_limit = std::min(6 * basis.result().diagnostics.ode_arithmetic,
                                        (left - ode_operation_cost * run_arithmetic(basis.result())) /
                                            (ode_operation_cost * directions));
      const ScenarioWork finer = run(c.scenario, e);
      c.ode_part = line_distance(basis.result().forward, finer.result().forward).distance;
      const double agreement = line_distance(basis.result().forward, coarse.result().forward).distance;
      c.trail.back() += ": distance to the coarser ODE run " + short_number(c.ode_part, 3) + ", to the split-operator run " +
                        short_number(agreement, 3);
      c.eigenbasis_seconds = seconds;
      // faster: it finished within half the split-operator run's time (estimated, above)
      if (c.ode_part + c.grid_part <= tolerance && agreement <= tolerance) {
        c.method = basis.result().method;
        step_shift = shift(basis, finer);
        coarse = std::move(basis);
      }
    } catch (const ArithmeticLimitReached& stop) {
      c.ode_stopped = true;
      c.cost_spent += stop.spent / unit;  // what the stopped run used
      const bool check = e.steps > 0;
      c.trail.push_back("eigenbasis ODE (tolerance " + short_number(e.ode.absolute, 2) + "): stopped when its " +
                        what_passed(stop) +
                        (check ? "its share of 1.5 times the chosen run (at most 6 times the first ODE run's)"
                               : "its share of 1.5 times the chosen run (at most half the split-operator run's time)") +
                        " (" + short_number(std::chrono::duration<double>(std::chrono::steady_clock::now() - tried).count(), 2) + " s)");
    }
  }
  if (coarse.result().steps == 0) step_shift = {0, 0};  // a sudden switch has no time step
  discretisation(coarse, step_shift, grid_shift,
                 c.method.rfind("eigenbasis", 0) == 0
                     ? "the --tolerance search's pairs: the eigenbasis ODE's check and the grid's refinement"
                     : "the --tolerance search's pairs: the time step's and the grid's refinement");
  c.work = std::move(coarse);
  c.work->request.spectrum.options.memo.reset();  // the returned request solves afresh
  c.scenario.spectrum.points = c.points;
  return c;
}

double lowest_spacing(const WorkResult& result) {
  const auto& e = result.initial_spectrum.energies;
  // first spacing above the ground group (degenerate levels are measured as one)
  for (Eigen::Index i = 1; i < e.size(); ++i)
    if (result.initial_spectrum.group.empty() || result.initial_spectrum.group[std::size_t(i)] != result.initial_spectrum.group[0])
      return e[i] - e[0];
  return nan_value;
}

double resolution_of(const WorkRun& run) {
  const auto& w = run.scenario.work;
  return w && w->resolution ? *w->resolution : lowest_spacing(run.result) / 20;
}

// Default: the lowest spacing, widened where needed so that the histogram has at most 4000 bins
// (a tunnelling doublet's splitting, say 1e-8 of the work range, would ask for 1e8 of them).
double bin_width_of(const WorkRun& run) {
  const auto& w = run.scenario.work;
  if (w && w->bin_width) return *w->bin_width;
  const auto& lines = run.result.distribution.lines;
  const double span = lines.empty() ? 0.0 : lines.back().work - lines.front().work;
  return std::max(lowest_spacing(run.result), span / 4000);
}

double defined_skewness(const WorkDistribution& d) {
  double spread = 0;
  for (const auto& l : d.lines) spread = std::max(spread, (l.work - d.mean) * (l.work - d.mean));
  if (!(d.variance > probability_rounding_floor * spread)) return nan_value;
  return d.skewness;
}

std::vector<WorkCheck> work_checks(const WorkRun& run) {
  const Diagnostics& g = run.result.diagnostics;
  const double spacing = lowest_spacing(run.result);
  std::vector<WorkCheck> c;
  c.push_back({"norm drift", g.norm_drift, 1e-8,
               "unitary steps keep the norm to rounding (~1e-12); 1e-8 flags a failing step (common practice)"});
  c.push_back({"unresolved weight", g.unresolved_weight, run.request.unresolved_tolerance,
               "WorkRequest.unresolved_tolerance: probability not captured by the final levels kept"});
  c.push_back({"edge amplitude", g.edge_amplitude, 1e-8,
               "relative |psi|^2 of the final states in the outer 2% of the grid, averaged with the initial "
               "populations; the library warns above 1e-8"});
  c.push_back(
      {"momentum edge", g.momentum_edge, momentum_edge_tolerance,
       "weight of the propagated states in the outer 2% of the grid's momenta, largest over the run; the "
       "library refines the automatic grid, and warns, above it"});
  c.push_back(
      {"position edge", g.position_edge, momentum_edge_tolerance,
       "weight of the propagated states in the outer 2% of the grid's points, largest over the run; the "
       "library widens the automatic grid, and warns, above it"});
  c.push_back({"time-step error", g.time_step_error, 1e-6,
               "max |dP(m->n)| against half the step; the library warns above 1e-6"});
  c.push_back({"grid convergence", g.grid_convergence / spacing, 1e-6,
               "max |dE| of the levels on a finer grid over the lowest spacing; 1e-6 is our choice (work lines "
               "placed to a millionth of a spacing)"});
  const double bound = g.truncation.bound;
  const bool reverse = run.result.reverse.has_value();
  c.push_back({"Jarzynski residual", std::abs(g.jarzynski_residual), reverse ? bound + 1e-9 : nan_value,
               "truncation bound eps_K + p_R(>=K) (solver/thermal.hpp) plus 1e-9 for the line errors of the "
               "propagation, as in run_work"});
  c.push_back({"Crooks ratio error", g.crooks_ratio_error,
               reverse ? g.truncation.thermal_tail + g.truncation.reverse_thermal_tail + 1e-6 : nan_value,
               "exact up to eps_A + eps_B (solver/work.hpp); plus 1e-6 for ratios of lines down to 1e-10, "
               "whose absolute rounding ~1e-16 is relative 1e-6"});
  return c;
}

std::vector<std::string> work_warnings(const WorkRun& run) {
  std::vector<std::string> w = run.result.diagnostics.warnings;
  for (const auto& c : work_checks(run)) {
    if (c.pass()) continue;
    if (c.name == "grid convergence")
      w.push_back("level energies change by " + short_number(c.value, 3) + " of the lowest spacing on a finer grid, "
                  "above " + short_number(c.tolerance, 3) + ": set [grid] points higher or widen [grid] left/right");
    if (c.name == "norm drift")
      w.push_back("norm drift " + short_number(c.value, 3) + " above " + short_number(c.tolerance, 3) +
                  ": raise [work] steps or use integrator = \"fourth_order\"");
    if (c.name == "Crooks ratio error")
      w.push_back("Crooks ratio error " + short_number(c.value, 3) + " above " + short_number(c.tolerance, 3) +
                  ": lower [work] thermal_tolerance or raise max_initial_levels");
  }
  if (run.tolerance && run.tolerance->bound_reached) {
    const ToleranceChoice& t = *run.tolerance;
    auto verified = [](double v) { return std::isnan(v) ? std::string("not verified") : short_number(v, 3); };
    w.push_back("the --tolerance search stopped at its cost bound (" + short_number(t.cost_bound, 3) +
                " times its first split-operator run's estimated arithmetic; next run not started): the result is its finest "
                "verified run, time-step part " + verified(t.time_step_part) + ", grid part " + verified(t.grid_part) +
                (t.reached() ? " (within " : " (NOT within ") + short_number(t.tolerance, 3) +
                "): loosen --tolerance or raise --search-budget");
  }
  if (const SoftWallComparison* c = run.soft_walls) {
    for (std::size_t i = 0; i < c->runs.size(); ++i) {
      const SoftWallRun& r = c->runs[i];
      if (!r.converged)
        w.push_back("soft walls of width " + run.scenario.soft_widths_given[i] + ": numerical error " +
                    short_number(r.numerical_error, 3) + " after " + std::to_string(r.steps) +
                    " steps: set [box.soft_walls] points higher, or widen the walls");
      if (i > 0 && !(r.distance.distance < c->runs[i - 1].distance.distance))
        w.push_back("soft walls do not approach the hard walls from width " + run.scenario.soft_widths_given[i - 1] +
                    " to " + run.scenario.soft_widths_given[i] + " (line distance " +
                    short_number(c->runs[i - 1].distance.distance, 3) + " -> " + short_number(r.distance.distance, 3) +
                    "): raise the wall height, or the widths are not yet small against the box");
    }
  }
  return w;
}

LinesFileFloor lines_file_floor(const WorkDistribution& d, double floor) {
  LinesFileFloor f;
  f.floor = floor;
  for (const auto& l : d.lines)
    if (l.probability < floor) {
      ++f.left_out;
      f.left_out_probability += l.probability;
    }
  return f;
}

CsvTable lines_table(const WorkRun& run, const WorkDistribution& d, const std::string& what) {
  const Energies e(run.scenario);
  const bool oscillator = e.omega_ref > 0;  // work_hbar_omega applies
  CsvTable t;
  t.columns = {{"work" + e.d.e_col, {}}, {"work_hbar_omega", {}, oscillator}, {"probability", {}},
               {"initial", {}},          {"final", {}},                      {"cumulative", {}}};
  const LinesFileFloor floor = lines_file_floor(d);
  double cumulative = 0;
  for (const auto& l : d.lines) {
    cumulative += l.probability;
    const double row[] = {e.show(l.work), oscillator ? conversion_rounded(l.work / e.omega_ref) : nan_value,
                          l.probability,  double(l.initial), double(l.final), cumulative};
    for (std::size_t k = 0; k < t.columns.size(); ++k) t.columns[k].values.push_back(row[k]);
    t.left_out_of_file.push_back(l.probability < floor.floor);
  }
  t.comments = {
      "trapwork work: " + what + " of " + (run.scenario.title.empty() ? run.scenario.file : run.scenario.title),
      "two-point measurement: W = E_n(final) - E_m(initial), probability = p_m P(m -> n), sorted by W",
      "work in " + e.d.e + (oscillator ? " and in hbar*omega_ref" : "; work_hbar_omega empty: no reference frequency") +
          "; lines closer than " + number_text(e.show(d.merge_tolerance)) + " " + e.d.e +
          " are merged (initial, final: the first merged pair)",
      "cumulative: running sum of probability over every line (also those left out below); total resolved " +
          number_text(d.resolved_weight) + ", unresolved " + number_text(d.unresolved_weight),
      "probability floor " + number_text(floor.floor) + ": " + std::to_string(floor.left_out) +
          " lines below it left out of this file, total probability " + number_text(floor.left_out_probability) +
          " (the statistics in summary.json use every line)",
  };
  return t;
}

CsvTable histogram_table(const WorkRun& run) {
  const Energies e(run.scenario);
  const WorkHistogram h = histogram(run.result.distribution, bin_width_of(run));
  CsvTable t;
  t.columns = {{"bin_start" + e.d.e_col, {}}, {"bin_end" + e.d.e_col, {}}, {"probability", {}}};
  for (std::size_t k = 0; k < h.probability.size(); ++k) {
    t.columns[0].values.push_back(e.show(h.start + double(k) * h.width));
    t.columns[1].values.push_back(e.show(h.start + double(k + 1) * h.width));
    t.columns[2].values.push_back(h.probability[k]);
  }
  t.comments = {"trapwork work: histogram of P(W), bins [bin_start, bin_end) of width " +
                    number_text(e.show(h.width)) + " " + e.d.e,
                "bin width: [work] bin_width, default the lowest level spacing of the initial trap (at least 1/4000 "
                "of the work range)"};
  return t;
}

CsvTable density_table(const WorkRun& run) {
  const Energies e(run.scenario);
  const double sigma = resolution_of(run);
  const auto w = density_grid(run.result.distribution, sigma);
  const auto rho = broadened_density(run.result.distribution, sigma, w);
  const auto& harmonic = run.result.harmonic;
  const auto ref = harmonic ? broadened_density(harmonic->distribution, sigma, w) : std::vector<double>(w.size(), nan_value);
  CsvTable t;
  t.columns = {{"work" + e.d.e_col, {}},
               {"density_per" + e.d.e_col, {}},
               {"harmonic_density_per" + e.d.e_col, {}, harmonic.has_value()}};
  for (std::size_t i = 0; i < w.size(); ++i) {
    t.columns[0].values.push_back(e.show(w[i]));
    t.columns[1].values.push_back(rho[i] * e.d.energy_per);  // per display unit
    t.columns[2].values.push_back(ref[i] * e.d.energy_per);
  }
  t.comments = {"trapwork work: P(W) seen through a Gaussian energy-measurement resolution sigma = " +
                    number_text(e.show(sigma)) + " " + e.d.e + " ([work] resolution, default 1/20 of the lowest spacing)",
                "density: sum_l p_l N(W - W_l; sigma), per " + e.d.e + "; harmonic_density: the same for the harmonic " +
                    (harmonic ? std::string("reference") : "reference, empty: " + harmonic_absence(run))};
  return t;
}

CsvTable transition_table(const WorkRun& run) {
  const Eigen::MatrixXd& p = run.result.forward.transitions.probability;
  const auto& harmonic = run.result.harmonic;
  CsvTable t;
  t.columns = {{"initial", {}}, {"final", {}}, {"probability", {}}, {"reference_probability", {}, harmonic.has_value()}};
  for (Eigen::Index m = 0; m < p.rows(); ++m)
    for (Eigen::Index n = 0; n < p.cols(); ++n) {
      t.columns[0].values.push_back(double(m));
      t.columns[1].values.push_back(double(n));
      t.columns[2].values.push_back(p(m, n));
      t.columns[3].values.push_back(harmonic ? harmonic->reference.probability(m, n) : nan_value);
    }
  t.comments = {"trapwork work: transition probabilities P(m -> n) = |<n_final|U|m_initial>|^2",
                "initial: level m of the initial trap (the levels kept), final: level n of the final trap; "
                "reference_probability: " +
                    (harmonic ? harmonic->model : "empty: " + harmonic_absence(run))};
  return t;
}

CsvTable characteristic_table(const WorkRun& run) {
  const Energies e(run.scenario);
  const double spacing = lowest_spacing(run.result);
  const double u_max = 2 * 2 * si::pi / spacing;  // two periods of a harmonic line comb
  std::vector<double> u(401);
  for (std::size_t i = 0; i < u.size(); ++i) u[i] = u_max * double(i) / double(u.size() - 1);
  const auto g = characteristic_function(run.result.distribution, u);
  CsvTable t;
  t.columns = {{"conjugate_variable_per" + e.d.e_col, {}},
               {"characteristic_function_real", {}},
               {"characteristic_function_imaginary", {}}};
  for (std::size_t i = 0; i < u.size(); ++i) {
    t.columns[0].values.push_back(u[i] * e.d.energy_per);
    t.columns[1].values.push_back(g[i].real());
    t.columns[2].values.push_back(g[i].imag());
  }
  t.comments = {"trapwork work: characteristic function G(u) = <exp(i u W)> = sum_l p_l exp(i u W_l): "
                "characteristic_function_real = Re G(u), characteristic_function_imaginary = Im G(u)",
                "conjugate_variable: u, the variable conjugate to W, in 1/" + e.d.e +
                    ", from 0 to 4 pi / (lowest spacing)"};
  return t;
}

namespace {

double wall_speed_si(const Scenario& s, double internal) {
  return internal * s.units.length_m / s.units.time_s();
}

// --tolerance: the bound asked for, what was chosen, the estimate and every run made.
nlohmann::ordered_json tolerance_json(const WorkRun& run) {
  if (!run.tolerance) return nullptr;
  const ToleranceChoice& t = *run.tolerance;
  return {{"requested", t.tolerance},  {"estimate", t.estimate()}, {"reached", t.reached()},
          {"time_step_part", number_or_null(t.time_step_part)}, {"grid_part", number_or_null(t.grid_part)},
          {"max_work_shift", display(run.scenario).energy(t.max_work_shift)},
          {"steps", t.steps}, {"points", t.points}, {"method", t.method},
          {"ode_part", number_or_null(t.ode_part)}, {"ode_cost_ratio", number_or_null(t.ode_cost_ratio)}, {"split_seconds", number_or_null(t.split_seconds)},
          {"eigenbasis_seconds", number_or_null(t.eigenbasis_seconds)}, {"ode_stopped", t.ode_stopped},
          {"ode_first", t.ode_first},
          {"time_step_rule", t.time_step_rule},
          {"cost_bound", t.cost_bound}, {"cost_spent", t.cost_spent}, {"cost_bound_reached", t.bound_reached},
          {"cost_over_chosen_run", t.chosen_cost > 0 ? nlohmann::ordered_json(t.cost_spent / t.chosen_cost) : nullptr},
          {"runs", t.trail}};
}

// Moving walls: the exact references (null where they do not apply), display energy units.
nlohmann::ordered_json walls_json(const WorkRun& run) {
  if (!run.walls) return nullptr;
  const Display d = display(run.scenario);
  nlohmann::ordered_json j = {{"grid_line_change", number_or_null(run.walls->grid_line_change)},
                              {"doescher_rice", nullptr},
                              {"doescher_rice_absent", run.walls->doescher_rice_absent.empty()
                                                           ? nlohmann::ordered_json(nullptr)
                                                           : nlohmann::ordered_json(run.walls->doescher_rice_absent)},
                              {"sudden_expansion", nullptr}};
  if (const auto& c = run.walls->doescher_rice)
    j["doescher_rice"] = {{"wall_speed_m_per_s", wall_speed_si(run.scenario, c->speed)},
                          {"final_levels", c->levels},
                          {"mean_work", d.energy(c->mean_work)},
                          {"mean_work_error", d.energy(c->mean_work_error)},
                          {"sd_work", d.energy(std::sqrt(c->variance))},
                          {"sd_work_error", d.energy(c->variance_error / std::sqrt(c->variance))},
                          {"mean_work_difference", d.energy(c->mean_work_difference)},
                          {"max_line_difference", c->max_line_difference}};
  if (const auto& s = run.walls->sudden)
    j["sudden_expansion"] = {{"mean_exp_minus_beta_work", s->average},
                             {"partition_ratio", s->partition_ratio},
                             {"ratio", s->ratio}};
  j["soft_walls"] = nullptr;
  if (const SoftWallComparison* c = run.soft_walls) {
    const SoftWallRequest& req = *run.scenario.soft_walls;
    nlohmann::ordered_json runs = nlohmann::ordered_json::array();
    for (const SoftWallRun& r : c->runs)
      runs.push_back({{"width_um", d.length(r.width)},
                      {"points", r.points},
                      {"steps", r.steps},
                      {"mean_work", d.energy(r.mean_work)},
                      {"mean_work_difference", d.energy(r.mean_work_difference)},
                      {"line_distance", r.distance.distance},
                      {"max_work_shift", d.energy(r.distance.max_work_shift)},
                      {"numerical_error", r.numerical_error},
                      {"converged", r.converged}});
    j["soft_walls"] = {{"height", d.energy(req.shape.height)},
                       {"power", req.shape.power},
                       {"hard_mean_work", d.energy(c->hard_mean_work)},
                       {"runs", runs},
                       {"observed_order", number_or_null(c->observed_order)},
                       {"extrapolated_mean_work", number_or_null(d.energy(c->extrapolated_mean_work))}};
  }
  return j;
}

}  // namespace

// What lines.csv leaves out (lines_file_floor).
json lines_file_json(const WorkDistribution& d) {
  const LinesFileFloor f = lines_file_floor(d);
  return {{"probability_floor", f.floor}, {"left_out", f.left_out}, {"left_out_probability", f.left_out_probability}};
}

// The moments' error estimate and its parts (energies as `energy` writes them; variances in
// internal energy^2). An error that is not known is null, with "error_known": false.
template <class Energy>
json moments_json(const MomentErrors& m, const Energy& energy) {
  return {{"mean_direct", energy(m.mean_direct)},
          {"variance_direct_internal", number_or_null(m.variance_direct)},
          {"mean_final_levels_part", energy(m.mean_final)},
          {"mean_thermal_part", energy(m.mean_thermal)},
          {"mean_basis_part", energy(m.mean_basis)},
          {"variance_final_levels_part_internal", number_or_null(m.variance_final)},
          {"variance_thermal_part_internal", number_or_null(m.variance_thermal)},
          {"variance_basis_part_internal", number_or_null(m.variance_basis)},
          {"mean_discretisation_part", energy(m.mean_discretisation)},
          {"variance_discretisation_part_internal", number_or_null(m.variance_discretisation)},
          {"discretisation_measured_by",
           m.discretisation_from.empty() ? json(nullptr) : json(m.discretisation_from)},
          {"variance_error_internal", number_or_null(m.reported_variance_error())},
          {"mean_error_known", std::isfinite(m.mean_error)},
          {"variance_error_known", std::isfinite(m.variance_error)},
          {"relative_tolerance", number_or_null(m.tolerance)},
          {"mean_rounding_floor", energy(m.rounding_mean)},
          {"mean_met", m.mean_met()},
          {"variance_met", m.variance_met()}};
}

json work_summary(const WorkRun& run) {
  const Scenario& s = run.scenario;
  const WorkResult& r = run.result;
  const WorkDistribution& d = r.distribution;
  const Energies e(s);
  const Display& D = e.d;
  const Thermal th = thermal_of(run);
  auto energy = [&](double internal) {
    json j = {{"value", number_or_null(e.show(internal))}, {"internal", number_or_null(internal)}};
    if (e.oscillator()) j["hbar_omega"] = number_or_null(conversion_rounded(internal / e.omega_ref));
    return j;
  };
  json changes = json::array();
  if (s.protocol)
    for (const auto& c : s.protocol->changes)
      changes.push_back({{"parameter", c.parameter},
                         {"ramp", c.ramp},
                         {"from", c.from ? c.from_given : potential_value_text(s, c)},
                         {"to", c.to_given},
                         {"file", c.file},
                         {"formula", c.formula},
                         {"text", change_text(s, c)}});
  const double tau = run.protocol.duration();
  json harmonic = nullptr;
  if (r.harmonic) {
    const auto& h = *r.harmonic;
    const double diff = d.mean - h.mean_work;
    harmonic = {{"model", h.model},
                {"parameter_name", h.model.rfind("displaced", 0) == 0 ? "|alpha|^2" : "Q*"},
                {"parameter", h.parameter},
                {"exact", h.exact},
                {"mean_work", energy(h.mean_work)},
                {"sd_work", energy(sd_of(h.distribution))},
                {"departure", energy(diff)},
                {"departure_percent", number_or_null(departure_percent(diff, h.mean_work, lowest_spacing(r)))},
                {"max_line_difference", h.max_line_difference}};
  }
  json crooks = nullptr;
  if (r.crooks)
    crooks = {{"max_line_difference", r.crooks->max_line_difference},
              {"max_ratio_error", r.crooks->max_ratio_error},
              {"lines_compared", r.crooks->lines_compared},
              {"ratios_compared", r.crooks->ratios_compared}};
  json checks = json::array();
  for (const auto& c : work_checks(run))
    checks.push_back({{"name", c.name},
                      {"value", number_or_null(c.value)},
                      {"tolerance", number_or_null(c.tolerance)},
                      {"pass", c.pass()},
                      {"checked", std::isfinite(c.value) && std::isfinite(c.tolerance)},
                      {"tolerance_source", c.source}});
  const auto& g = r.diagnostics;
  return {
      {"command", "trapwork work"},
      {"scenario", {{"file", s.file}, {"title", s.title}, {"description", s.description}}},
      {"units", units_json(s)},
      {"potential", potential_json(s)},
      {"protocol",
       {{"duration_us", duration_us(s, tau)},
        {"duration", duration_text(s, tau)},
        {"duration_internal", tau},
        {"duration_given", s.protocol ? s.protocol->duration_given : ""},
        {"changes", changes}}},
      {"initial",
       {{"given", s.work ? s.work->initial_given : ""},
        {"gibbs", th.gibbs},
        {"beta_internal", number_or_null(th.beta)},
        {"temperature_uK", number_or_null(th.temperature_uK)},
        {"mean_phonons", number_or_null(th.mean_phonons)},
        {"lowest_spacing", energy(lowest_spacing(r))}}},
      {"grid", grid_json(r.grid, D)},
      {"co_moving", r.co_moving},
      {"method", r.method},
      {"steps", r.steps},
      {"time_step_ns", number_or_null(time_step_ns(run))},
      {"levels",
       {{"initial_kept", r.forward.transitions.initial_levels()},
        {"final", r.forward.transitions.final_levels()},
        {"left_out_thermal_weight", g.truncation.thermal_tail},
        {"thermal_tolerance", run.request.thermal_tolerance},
        {"thermal_tolerance_used", number_or_null(g.thermal_tolerance)},
        {"final_margin_used", g.final_margin}}},
      {"work",
       {{"mean", energy(d.mean)},
        {"mean_error", energy(g.moments.reported_mean_error())},
        {"sd", energy(sd_of(d))},
        {"sd_error", energy(sd_error_of(d, g.moments))},
        {"moments", moments_json(g.moments, energy)},
        {"skewness", number_or_null(defined_skewness(d))},
        {"skewness_error_known", false},
        {"free_energy_change", energy(d.free_energy_change)},
        {"dissipated_work", energy(d.dissipated_work)},
        {"resolved_weight", d.resolved_weight},
        {"unresolved_weight", d.unresolved_weight},
        {"lines", d.lines.size()},
        {"lines_file", lines_file_json(d)},
        {"resolution", energy(resolution_of(run))},
        {"bin_width", energy(bin_width_of(run))}}},
      {"jarzynski",
       {{"average_exp_minus_beta_W", number_or_null(d.jarzynski_average)},
        {"partition_ratio", number_or_null(d.partition_ratio)},
        {"residual", number_or_null(d.jarzynski_residual)},
        {"truncation_bound", r.reverse ? json(g.truncation.bound) : json(nullptr)},
        {"thermal_tail", g.truncation.thermal_tail},
        {"reverse_tail", r.reverse ? json(g.truncation.reverse_tail) : json(nullptr)},
        {"reverse_thermal_tail", r.reverse ? json(g.truncation.reverse_thermal_tail) : json(nullptr)}}},
      {"crooks", crooks},
      {"harmonic", harmonic},
      {"harmonic_absent", r.harmonic || r.harmonic_absent.empty() ? json(nullptr) : json(r.harmonic_absent)},
      {"walls", walls_json(run)},
      {"tolerance", tolerance_json(run)},
      {"diagnostics",
       {{"norm_drift", g.norm_drift},
        {"unresolved_weight", g.unresolved_weight},
        {"edge_amplitude", g.edge_amplitude},
        {"momentum_edge", number_or_null(g.momentum_edge)},
        {"position_edge", number_or_null(g.position_edge)},
        {"grid_refinements", g.grid_refinements},
        {"time_step_error", number_or_null(g.time_step_error)},
        {"max_phase_per_step", g.max_phase_per_step},
        {"grid_convergence", number_or_null(g.grid_convergence)},
        {"grid_convergence_unit", "internal energy (hbar^2/(m L0^2))"},
        {"estimated_memory_bytes", g.estimated_bytes},  // before the propagation (solver/cost.hpp)
        {"estimated_operations", g.estimated_operations},
        {"checks", checks}}},
      {"traces",
       {{"points", run.result.traces.time.size()},
        {"levels", run.result.traces.populations.cols()},
        {"note", traces_absent(run).empty() ? json(nullptr) : json(traces_absent(run))}}},
      {"warnings", work_warnings(run)},
      {"notes", r.diagnostics.notes},
  };
}

namespace {
// One panel of potential.png / spectrum.png: V on the spectrum's grid shifted by `shift`, the
// lowest `shown` levels, the densities of the lowest four and the walls of a hard-walled grid.
LevelsPanel levels_panel(const Scenario& s, const LengthUnit& lu, const std::string& title, const Potential& v,
                         const Spectrum& sp, double shift, int shown) {
  const Display d = display(s);
  LevelsPanel p;
  p.title = title;
  // A small grid (a Hermite basis' few dozen points) is drawn at 400 points, each state by the
  // band-limited function its samples represent, so that |psi|^2 is a smooth curve.
  const std::size_t size = sp.grid.size();
  std::vector<double> x = sp.grid.points();
  if (size < 400) {
    const double lo = sp.grid.boundary() == Boundary::periodic ? sp.grid.left() : sp.grid.x(0);
    const double hi = sp.grid.x(size - 1);
    x.resize(400);
    for (std::size_t i = 0; i < x.size(); ++i) x[i] = lo + (hi - lo) * double(i) / double(x.size() - 1);
  }
  std::vector<double> xs(x);
  for (double& xi : xs) xi += shift;
  const auto values = v.evaluate(xs);
  for (std::size_t j = 0; j < xs.size(); ++j) {
    p.x.push_back(xs[j] / lu.internal_per_unit);
    p.potential.push_back(d.energy(values[j]));
  }
  const int n = std::min<int>(shown, int(sp.energies.size()));
  for (int k = 0; k < n; ++k) p.energies.push_back(d.energy(sp.energies[k]));
  for (int k = 0; k < std::min(n, 4); ++k) {
    std::vector<double> psi(size);
    for (std::size_t j = 0; j < size; ++j) psi[j] = sp.states(Eigen::Index(j), k);
    if (size < 400) psi = band_limited_values(sp.grid, psi, x);
    std::vector<double> rho(psi.size());
    for (std::size_t j = 0; j < psi.size(); ++j) rho[j] = psi[j] * psi[j];
    p.densities.push_back(std::move(rho));
  }
  if (sp.grid.boundary() == Boundary::hard_wall)
    p.walls = {(sp.grid.left() + shift) / lu.internal_per_unit, (sp.grid.right() + shift) / lu.internal_per_unit};
  return p;
}
}  // namespace

// potential.png: the initial and final potentials with their lowest levels and the first
// densities, in the lab frame.
LevelsFigure levels_figure(const WorkRun& run) {
  const WorkResult& r = run.result;
  const Display d = display(run.scenario);
  const LengthUnit lu = length_unit(run.scenario, r.grid);
  const int kept = r.forward.transitions.initial_levels();
  const int shown = std::min<int>(12, std::max(kept + 2, 6));
  auto panel = [&](const std::string& title, const Potential& v, const Spectrum& sp, double shift) {
    return levels_panel(run.scenario, lu, title, v, sp, shift, shown);
  };
  LevelsFigure f;
  f.title = "potential, levels and |ψ#dn#u|#u2#d at the start and the end of the protocol";
  f.x_label = "position x (" + lu.name + ")";
  f.energy_label = "energy E (" + d.e + ")";
  f.panels.push_back(panel("start, t = 0", run.protocol.initial(run.scenario.potential), r.initial_spectrum, 0));
  f.panels.push_back(panel("end, t = " + duration_text(run.scenario, run.protocol.duration()), run.protocol.final(run.scenario.potential),
                           r.final_spectrum, frame_shift(run)));
  return f;
}

namespace {
WorkSeries series(const std::string& label, const WorkDistribution& dist, double sigma, const std::vector<double>& w,
                  const Display& d) {
  WorkSeries s;
  s.label = label;
  for (const auto& l : dist.lines) {  // all of them: the figure counts those below its floor
    s.work.push_back(d.energy(l.work));
    s.probability.push_back(l.probability);
  }
  const auto rho = broadened_density(dist, sigma, w);
  for (std::size_t i = 0; i < w.size(); ++i) {
    s.density_work.push_back(d.energy(w[i]));
    s.density.push_back(rho[i] * d.energy_per);
  }
  return s;
}

}  // namespace

WorkSeries work_series(const WorkRun& run, const std::string& label, const WorkDistribution& distribution) {
  const double sigma = resolution_of(run);
  return series(label, distribution, sigma, density_grid(distribution, sigma), display(run.scenario));
}

WorkFigure work_figure(const WorkRun& run) {
  const WorkResult& r = run.result;
  const Display d = display(run.scenario);
  const double sigma = resolution_of(run);
  const auto w = density_grid(r.distribution, sigma);
  WorkFigure f;
  f.title = "work distribution (two-point measurement)";
  f.resolution = d.energy(sigma);
  f.resolution_source = run.scenario.work && run.scenario.work->resolution
                            ? "[work] resolution"
                            : "default: 1/20 of the lowest spacing; [work] resolution sets it";
  f.work_label = "work W (" + d.e + ")";
  f.density_label = "density (1/" + d.e + ")";
  f.result = series("numerical (" + std::string(r.co_moving ? "co-moving grid" : "grid") + ")", r.distribution, sigma,
                    w, d);
  if (r.harmonic) f.reference = series("harmonic prediction", r.harmonic->distribution, sigma, w, d);
  f.mean_work = d.energy(r.distribution.mean);
  if (std::isfinite(r.distribution.free_energy_change)) {
    // The marker's label shows Delta F to a millionth of the lowest spacing (the rounding noise
    // of a translation's Delta F = 0 would otherwise read like a value).
    const double step = 1e-6 * lowest_spacing(r);
    f.free_energy_change = d.energy(std::round(r.distribution.free_energy_change / step) * step) + 0.0;
  }
  return f;
}

LevelsFigure spectrum_figure(const Scenario& s, const SpectrumResult& result) {
  const Display d = display(s);
  const LengthUnit lu = length_unit(s, result.spectrum.grid);
  LevelsFigure f;
  f.title = "potential, levels and |ψ#dn#u|#u2#d of the lowest four";
  f.x_label = "position x (" + lu.name + ")";
  f.energy_label = "energy E (" + d.e + ")";
  f.panels.push_back(levels_panel(s, lu, "", s.potential, result.spectrum, 0, 12));  // as potential.png
  return f;
}

ShownUnit shown_unit(const WorkRun& run, const Dimension& dim, double largest) {
  const Scenario& s = run.scenario;
  if (dim == Dimension::none()) return {"", 1};
  if (dim == Dimension::energy()) return {display(s).e, display(s).energy_per};
  if (dim == Dimension::length()) {
    const LengthUnit lu = length_unit(s, run.result.grid);
    return {lu.name, lu.internal_per_unit};
  }
  const double si_per_internal = s.units.to_si(1.0, dim);
  if (dim == Dimension::time()) return {"us", 1e-6 / si_per_internal};
  if (dim == Dimension::frequency()) {  // ordinary frequency
    const double hz = std::abs(largest * si_per_internal);
    // (1 MHz converted to internal units and back may land a rounding below 1e6 Hz)
    return hz >= 1e6 * (1 - 1e-9) ? ShownUnit{"MHz", 1e6 / si_per_internal} : ShownUnit{"kHz", 1e3 / si_per_internal};
  }
  return {si_unit(dim), 1 / si_per_internal};
}

namespace {
// The time axis of a run's pictures: the unit protocol.duration was written in (us by default).
ShownUnit time_unit(const WorkRun& run) {
  const std::string u = duration_unit(run.scenario);
  const double per = u == "ns" ? 1e-9 : u == "ms" ? 1e-3 : u == "s" ? 1.0 : 1e-6;
  return {u == "ns" || u == "ms" || u == "s" ? u : "us", per / run.scenario.units.to_si(1.0, Dimension::time())};
}
}  // namespace

std::optional<StackedFigure> protocol_figure(const WorkRun& run) {
  const Scenario& s = run.scenario;
  if (!s.protocol || s.protocol->changes.empty()) return std::nullopt;
  const double tau = run.protocol.duration();
  std::optional<WallProtocol> walls;
  if (moves_walls(s)) walls = build_wall_protocol(s);
  const ShownUnit tu = time_unit(run);
  std::vector<double> times;  // internal
  if (tau > 0)
    for (int i = 0; i <= 400; ++i) times.push_back(tau * i / 400.0);
  StackedFigure f;
  f.title = tau > 0 ? "protocol: the scheduled parameters against time"
                    : "protocol: a sudden switch at t = 0 (drawn as a step; the time axis has no scale)";
  f.x_label = "time t (" + tu.name + ")";
  std::vector<Dimension> dims;
  for (const ChangeSpec& c : s.protocol->changes) {
    const Schedule* schedule = nullptr;
    for (const auto& sc : run.protocol.schedules())
      if (sc.address() == c.parameter) schedule = &sc;
    if (!schedule && walls) schedule = c.parameter == "box.left" ? &walls->left() : c.parameter == "box.right" ? &walls->right() : nullptr;
    if (!schedule) continue;
    SweepCurve curve;
    curve.label = c.parameter;
    std::vector<double> values;
    if (tau > 0) {
      for (double t : times) values.push_back(schedule->evaluate(t, tau).value);
      for (double t : times) curve.x.push_back(t / tu.internal_per_unit);
    } else {
      const double a = schedule->initial_value(0), b = schedule->final_value(0);
      values = {a, a, b, b};
      curve.x = {-1, 0, 0, 1};
    }
    double largest = 0;
    for (double v : values) largest = std::max(largest, std::abs(v));
    const ShownUnit u = shown_unit(run, c.dimension, largest);
    for (double v : values) curve.y.push_back(conversion_rounded(v / u.internal_per_unit));
    std::size_t k = 0;
    while (k < dims.size() && !(dims[k] == c.dimension)) ++k;
    if (k == dims.size()) {
      if (dims.size() == 6) continue;  // plot_stack draws at most six panels
      dims.push_back(c.dimension);
      f.panels.push_back({u.name.empty() ? "value" : "value (" + u.name + ")", {}, false});
    }
    if (f.panels[k].curves.empty()) f.panels[k].y_label = c.parameter + (u.name.empty() ? "" : " (" + u.name + ")");
    else f.panels[k].y_label = "value (" + u.name + ")";
    f.panels[k].curves.push_back(std::move(curve));
  }
  if (f.panels.empty()) return std::nullopt;
  return f;
}

SweepFigure populations_figure(const WorkRun& run) {
  const WorkResult& r = run.result;
  const std::vector<double> final = final_populations(r.forward);
  std::vector<double> reference;
  if (r.harmonic && r.harmonic->initial_weights.size() == std::size_t(r.harmonic->reference.initial_levels()))
    reference = final_populations({r.harmonic->reference, {}, {}, r.harmonic->initial_weights, {}, {}, std::nullopt});
  // levels up to the last holding 1e-4 of the largest population (at least 5)
  double top = 0;
  for (double p : final) top = std::max(top, p);
  for (double p : reference) top = std::max(top, p);
  std::size_t shown = std::min<std::size_t>(5, final.size());
  for (std::size_t n = 0; n < final.size(); ++n)
    if (final[n] >= 1e-4 * top || (n < reference.size() && reference[n] >= 1e-4 * top)) shown = std::max(shown, n + 1);
  SweepFigure f;
  f.title = "level populations: final P(n) = Σ#dm#u p#dm#u P(m→n) and initial p#dn#u";
  // The three series side by side at each n (initial n - 0.25, harmonic n + 0.25), so that
  // markers of equal values do not hide each other.
  f.x_label = std::string("level n of H_B (final) or H_A (initial p#dn#u, drawn at n - 0.25") +
              (reference.empty() ? ")" : "; harmonic at n + 0.25)");
  f.y_label = "population";
  f.log_y = true;  // the tail (down to 1e-4 of the largest population) is read on a log axis
  SweepPoints numeric{"final P(n), numerical", {}, {}, {}}, initial{"initial p#dn#u", {}, {}, {}};
  for (std::size_t n = 0; n < shown; ++n) {
    numeric.x.push_back(double(n));
    numeric.y.push_back(final[n]);
  }
  for (std::size_t n = 0; n < std::min(shown, r.forward.initial_weights.size()); ++n) {
    initial.x.push_back(double(n) - 0.25);
    initial.y.push_back(r.forward.initial_weights[n]);
  }
  f.points.push_back(std::move(numeric));
  if (!reference.empty()) {
    SweepPoints h{"final P(n), harmonic prediction (" + r.harmonic->model + ")", {}, {}, {}};
    for (std::size_t n = 0; n < std::min(shown, reference.size()); ++n) {
      h.x.push_back(double(n) + 0.25);
      h.y.push_back(reference[n]);
    }
    f.points.push_back(std::move(h));
  }
  f.points.push_back(std::move(initial));
  return f;
}

std::string traces_absent(const WorkRun& run) {
  if (!run.result.traces.time.empty()) return "";
  if (run.walls) return "not computed for this path (moving walls: the run propagates on the dilated box)";
  return run.result.traces.absent.empty() ? "not computed for this path" : run.result.traces.absent;
}

CsvTable traces_table(const WorkRun& run) {
  const Display d = display(run.scenario);
  const WorkTraces& tr = run.result.traces;
  CsvTable t;
  t.columns = {{"time_us", {}}, {"position_mean_um", {}}, {"energy_mean" + d.e_col, {}}};
  for (int n = 0; n < trace_columns_levels; ++n) t.columns.push_back({"population_" + std::to_string(n), {}});
  for (std::size_t i = 0; i < tr.time.size(); ++i) {
    t.columns[0].values.push_back(duration_us(run.scenario, tr.time[i]));
    t.columns[1].values.push_back(d.length(tr.position_mean[i]));
    t.columns[2].values.push_back(d.energy(tr.energy_mean[i]));
    for (int n = 0; n < trace_columns_levels; ++n)
      t.columns[std::size_t(3 + n)].values.push_back(n < tr.populations.cols() ? tr.populations(Eigen::Index(i), n)
                                                                               : nan_value);
  }
  t.comments = {"trapwork work: time traces of the forward run at its observation points, averages over the propagated "
                "initial states with their initial weights p_m (thermal averages for a Gibbs state), lab frame",
                "position_mean: sum_m p_m <psi_m|x|psi_m>; energy_mean: sum_m p_m <psi_m|H(t)|psi_m>; population_n: "
                "sum_m p_m |<n(t)|psi_m(t)>|^2, n(t) the instantaneous eigenstates of H(t) on the grid (nan: the "
                "spectrum holds fewer levels)"};
  if (const std::string why = traces_absent(run); !why.empty()) t.comments.push_back("time traces " + why);
  return t;
}

std::optional<StackedFigure> traces_figure(const WorkRun& run) {
  const WorkTraces& tr = run.result.traces;
  if (tr.time.empty()) return std::nullopt;
  const Display d = display(run.scenario);
  const LengthUnit lu = length_unit(run.scenario, run.result.grid);
  const ShownUnit tu = time_unit(run);
  std::vector<double> t;
  for (double ti : tr.time) t.push_back(ti / tu.internal_per_unit);
  StackedFigure f;
  f.title = "time traces: averages over the propagated initial states with their weights";
  f.x_label = "time t (" + tu.name + ")";
  StackPanel x{"<x> (" + lu.name + ")", {}, true}, e{"<H(t)> (" + d.e + ")", {}, true}, p{"population", {}, true};
  // <x> below 1e-9 of the grid's length is rounding (a centred state, ~1e-15 um), drawn as 0 so that
  // the panel does not blow the noise up to full height (traces.csv keeps the numbers)
  SweepCurve xc{"<x>(t)", t, {}};
  for (double v : tr.position_mean) xc.y.push_back(std::abs(v) < 1e-9 * run.result.grid.length() ? 0.0 : v / lu.internal_per_unit);
  x.curves.push_back(std::move(xc));
  if (const auto translation = run.protocol.translation(run.scenario.potential)) {
    const Schedule* centre = nullptr;
    for (const auto& sc : run.protocol.schedules())
      if (sc.address() == translation->addresses.front()) centre = &sc;
    if (centre) {
      SweepCurve c{"trap centre (" + centre->address() + ")", t, {}};
      for (double ti : tr.time) c.y.push_back(centre->evaluate(ti, run.protocol.duration()).value / lu.internal_per_unit);
      x.curves.push_back(std::move(c));
    }
  }
  SweepCurve ec{"<H(t)>", t, {}};
  for (double v : tr.energy_mean) ec.y.push_back(d.energy(v));
  e.curves.push_back(std::move(ec));
  for (Eigen::Index n = 0; n < tr.populations.cols(); ++n) {
    SweepCurve c{"level " + std::to_string(n), t, {}};
    for (Eigen::Index i = 0; i < tr.populations.rows(); ++i) c.y.push_back(tr.populations(i, n));
    p.curves.push_back(std::move(c));
  }
  f.panels = {std::move(x), std::move(e), std::move(p)};
  return f;
}

std::vector<std::string> work_output_names() {
  return {"lines.csv",      "histogram.csv", "density.csv",   "transition.csv", "reverse_lines.csv",
          "characteristic.csv", "summary.json", "potential.png", "potential.svg", "work.png",
          "work.svg", "traces.csv", "protocol.png", "protocol.svg", "populations.png", "populations.svg",
          "traces.png", "traces.svg", "noise_lines.csv", "lines_uncertainty.csv"};
}

std::vector<NamedTable> work_tables(const WorkRun& run) {
  std::vector<NamedTable> tables = {
      {"lines.csv", lines_table(run, run.result.distribution, "work lines")},
      {"histogram.csv", histogram_table(run)},
      {"density.csv", density_table(run)},
      {"transition.csv", transition_table(run)},
  };
  if (run.result.reverse_distribution)
    tables.push_back({"reverse_lines.csv", lines_table(run, *run.result.reverse_distribution, "reverse-run work lines")});
  tables.push_back({"characteristic.csv", characteristic_table(run)});
  tables.push_back({"traces.csv", traces_table(run)});
  return tables;
}

std::vector<NamedFigure> work_figures(const WorkRun& run) {
  std::vector<NamedFigure> figures = {{"potential", levels_figure(run)}, {"work", work_figure(run)}};
  if (auto f = protocol_figure(run)) figures.push_back({"protocol", std::move(*f)});
  figures.push_back({"populations", populations_figure(run)});
  if (auto f = traces_figure(run)) figures.push_back({"traces", std::move(*f)});
  return figures;
}

std::vector<fs::path> write_work_outputs(const fs::path& folder, const WorkRun& run) {
  return write_outputs(folder, work_tables(run), "summary.json", work_summary(run), {}, work_figures(run));
}

void print_work_report(std::ostream& out, const WorkRun& run) {
  const Scenario& s = run.scenario;
  const WorkResult& r = run.result;
  const WorkDistribution& d = r.distribution;
  const Energies e(s);
  auto row = [&](const std::string& label, const std::string& text) { print_row(out, label, text); };
  print_scenario_header(out, "work", s);
  const double tau = run.protocol.duration();
  std::string protocol = tau > 0 ? "duration " + duration_text(s, tau) : "sudden switch (duration 0)";
  if (s.omega_ref > 0 && tau > 0) {
    const std::string periods = short_number(tau * s.omega_ref / (2 * si::pi), 4);
    protocol += " (" + periods + (periods == "1" ? " period" : " periods") + " of the reference frequency)";
  }
  row("protocol", protocol);
  if (s.protocol)
    for (const auto& c : s.protocol->changes) row("", change_text(s, c));
  row("initial", initial_text(run));
  row("grid", grid_text(r.grid, display(s)));
  row("method", r.method + (r.steps > 0 ? ", " + std::to_string(r.steps) + " steps of dt = " +
                                              trapwork::lab_text(time_step_ns(run) * 1e-9, Dimension::time(), 4)
                                        : std::string()));
  const int kept = r.forward.transitions.initial_levels();
  row("levels", std::to_string(kept) + (kept == 1 ? " initial level" : " initial levels") + " kept" +
                    (thermal_of(run).gibbs ? " (left-out thermal weight " +
                                                 short_number(r.diagnostics.truncation.thermal_tail, 2) + ")"
                                           : std::string()) +
                    ", " + std::to_string(r.forward.transitions.final_levels()) + " final levels");
  // a long run says what it was estimated to cost before it started (solver/cost.hpp)
  if (estimated_seconds(r.diagnostics.estimated_operations, run.request.threads) > long_run_seconds)
    row("cost", cost_text({r.diagnostics.estimated_bytes, r.diagnostics.estimated_operations, "", ""},
                          run.request.threads) + " (estimated before the propagation)");

  out << "\nwork statistics\n";
  const MomentErrors& mom = r.diagnostics.moments;
  auto error_text = [&](double error, bool met) {
    if (!std::isfinite(error)) return std::string("  (error not known)");
    return "  +- " + e.text(error, 2) + (met ? "" : "  (above the tolerance " + short_number(mom.tolerance, 2) + ", relative)");
  };
  row("<W>", e.text(d.mean) + error_text(mom.reported_mean_error(), mom.mean_met()));
  row("sd(W)", e.text(sd_of(d)) + error_text(sd_error_of(d, mom), mom.variance_met()));
  if (std::isfinite(mom.mean_direct))
    row("moments",
        "from the states directly: <W> = " + e.text(mom.mean_direct, 10) +
            ", sd(W) = " + e.text(std::sqrt(std::max(0.0, mom.variance_direct)), 10) +
            "; <W> error parts: final levels " + e.text(std::abs(mom.mean_final), 2) + ", thermal cut " +
            e.text(mom.mean_thermal, 2) + ", basis " +
            (std::isfinite(mom.mean_basis) ? e.text(mom.mean_basis, 2) : std::string("not known")) +
            ", discretisation " +
            (std::isfinite(mom.mean_discretisation)
                 ? e.text(mom.mean_discretisation, 2) + " (from " + mom.discretisation_from + ")"
                 : std::string("not measured (no half-step run: set [work] time_step_check = true)")));
  row("skewness", !std::isnan(defined_skewness(d)) ? short_number(d.skewness, 4) + "  (error not estimated: line sum only)"
                  : d.variance > 0
                      ? "not defined: var(W) is below " + short_number(probability_rounding_floor) +
                            " max (W - <W>)^2, the size lines of probability at the rounding level give"
                      : std::string("not defined: sd(W) = 0 (a single work value)"));
  if (std::isfinite(d.free_energy_change)) {
    row("Delta F", e.text(d.free_energy_change));
    row("dissipated", e.text(d.dissipated_work) + "  (<W> - Delta F)");
    const std::string bound = r.reverse ? short_number(r.diagnostics.truncation.bound, 2) : std::string("not computed");
    row("Jarzynski", "<exp(-beta W)> = " + short_number(d.jarzynski_average, 10) + ", Z_B/Z_A = " +
                         short_number(d.partition_ratio, 10));
    row("", "residual " + short_number(d.jarzynski_residual, 2) + " (truncation bound eps_K + p_R(>=K) = " + bound + ")");
  }
  if (r.crooks)
    row("Crooks", "max |P_F(m->n) - P_R(n->m)| = " + short_number(r.crooks->max_line_difference, 2) +
                      ", max ratio error " + short_number(r.crooks->max_ratio_error, 2) + " over " +
                      std::to_string(r.crooks->ratios_compared) + " lines");

  if (run.tolerance) {
    const ToleranceChoice& t = *run.tolerance;
    out << "\nnumerics chosen for --tolerance " << short_number(t.tolerance, 3) << " (distance of P(W) over the lines)\n";
    for (const auto& line : t.trail) row("run", line);
    const bool ode = t.method.rfind("eigenbasis", 0) == 0;
    row("chosen", t.method + ", " + (ode ? std::string() : std::to_string(t.steps) + " steps, ") +
                      std::to_string(t.points) + " points");
    if (t.ode_first)
      row("cost", "eigenbasis ODE run " + short_number(t.eigenbasis_seconds, 2) +
                      " s (wall time here; estimated arithmetic " + short_number(t.ode_cost_ratio, 2) +
                      " times the coarse split-operator run's, which did not run)");
    else if (!std::isnan(t.eigenbasis_seconds))
      row("cost", "split-operator run " + short_number(t.split_seconds, 2) + " s, eigenbasis ODE run " +
                      short_number(t.eigenbasis_seconds, 2) + " s (wall time here; estimated arithmetic ratio " +
                      short_number(t.ode_cost_ratio, 2) + ")");
    else if (t.ode_stopped)
      row("method", "eigenbasis ODE stopped by its arithmetic budget (the run lines above say which)");
    row("cost", short_number(t.cost_spent, 3) +
                    (t.ode_first ? " times the estimated arithmetic of the coarse split-operator run (not run), bound "
                                 : " times the first split-operator run's estimated arithmetic, bound ") +
                    short_number(t.cost_bound, 3) + (t.bound_reached ? ": the bound stopped the search" : ""));
    if (t.ode_first && t.chosen_cost > 0)
      row("", short_number(t.cost_spent / t.chosen_cost, 3) +
                  " times the chosen ODE run alone with its usual check at 1/100 the tolerances (estimated "
                  "arithmetic, that check counted at the forward run's; the spectra not counted)");
    else if (t.chosen_cost > 0)
      row("", short_number(t.cost_spent / t.chosen_cost, 3) +
                  " times the chosen split-operator run alone with its usual half-step check (estimated arithmetic)");
    if (t.ode_first)
      row("estimate", short_number(t.estimate(), 3) + " (the distance to a run on 3/2 the points at T/500 with 2/3 "
                      "the basis: grid, ODE tolerance and basis together); lines move by up to " +
                      e.text(t.max_work_shift, 3) + (t.reached() ? "" : ": the tolerance is NOT reached"));
    else
      row("estimate", short_number(t.estimate(), 3) + " = " + short_number(ode ? t.ode_part : t.time_step_part, 3) +
                        (ode ? " (ODE tolerance and basis)" : " (time step: " + t.time_step_rule + ")") + " + " + short_number(t.grid_part, 3) +
                        " (grid); lines move by up to " + e.text(t.max_work_shift, 3) +
                        (t.reached() ? "" : ": the tolerance is NOT reached"));
  }
  if (r.harmonic) {
    const auto& h = *r.harmonic;
    const bool displaced = h.model.rfind("displaced", 0) == 0;
    out << "\nharmonic reference (" << h.model << (h.exact ? ", exact for this trap" : ", harmonic part of the trap")
        << ")\n";
    row(displaced ? "|alpha|^2" : "Q*", short_number(h.parameter, 8));
    row("<W> harm.", e.text(h.mean_work));
    row("sd(W) harm.", e.text(sd_of(h.distribution)));
    const double diff = d.mean - h.mean_work;
    const double percent = departure_percent(diff, h.mean_work, lowest_spacing(r));
    row("departure", "<W> - <W>_harm = " + e.text(diff, 4) +
                         (std::isnan(percent) ? " (percentage not defined: <W>_harm is 0 to rounding)"
                                              : " (" + short_number(percent, 3) + " %)"));
    row("lines", "max |P(m->n) - P_harm(m->n)| = " + short_number(h.max_line_difference, 3));
  } else if (run.walls) {
    const WallWorkResult& w = *run.walls;
    if (!std::isnan(w.grid_line_change))
      out << "\nmoving walls: max |dP(m->n)| with twice the points = " << short_number(w.grid_line_change, 3) << "\n";
    if (w.doescher_rice) {
      const auto& c = *w.doescher_rice;
      out << "\nexact reference: a wall at constant speed in a flat box (Doescher & Rice 1969)\n";
      row("wall speed", short_number(wall_speed_si(run.scenario, c.speed) * 1e3, 6) + " mm/s");
      row("<W> exact", e.text(c.mean_work) + "  +- " + e.text(c.mean_work_error, 2) + " (" + std::to_string(c.levels) +
                           " final levels, not the run's " + std::to_string(r.forward.transitions.final_levels()) + ")");
      row("sd(W) exact", e.text(std::sqrt(c.variance)) + "  +- " + e.text(c.variance_error / std::sqrt(c.variance), 2) +
                             " (var W converges slowly when the wall moves at the ends)");
      row("departure", "<W> - <W>_exact = " + e.text(c.mean_work_difference, 3));
      row("lines", "max |P(m->n) - P_exact(m->n)| = " + short_number(c.max_line_difference, 3));
    } else if (w.sudden) {
      out << "\nsudden expansion: the Jarzynski equality fails (the Hilbert space changes at once)\n";
      row("<e^-bW>", short_number(w.sudden->average, 10) + " over all initial levels (closed form)");
      row("Z_B/Z_A", short_number(w.sudden->partition_ratio, 10) + ", ratio " + short_number(w.sudden->ratio, 6));
    } else if (!w.doescher_rice_absent.empty()) {
      out << "\nexact reference: a wall at constant speed in a flat box (Doescher & Rice 1969), "
          << w.doescher_rice_absent << "\n";
    } else {
      out << "\nexact reference: none (the walls do not move at constant speed through a flat box)\n";
    }
    if (const SoftWallComparison* c = run.soft_walls) {
      out << "\nsoft walls: height " << e.text(run.scenario.soft_walls->shape.height) << " * ((x - wall)/width)^"
          << short_number(run.scenario.soft_walls->shape.power, 4) << " beyond each wall, on the ordinary grid\n";
      char line[200];
      std::snprintf(line, sizeof line, "  %-12s %7s %8s %16s %16s %14s %10s\n", "width", "points", "steps",
                    ("<W> " + e.d.e).c_str(), "<W> - hard", "line distance", "numerics");
      out << line;
      for (std::size_t i = 0; i < c->runs.size(); ++i) {
        const SoftWallRun& r = c->runs[i];
        std::snprintf(line, sizeof line, "  %-12s %7zu %8d %16s %16s %14s %10s\n",
                      run.scenario.soft_widths_given[i].c_str(), r.points, r.steps, short_number(e.show(r.mean_work), 8).c_str(),
                      short_number(e.show(r.mean_work_difference), 3).c_str(), short_number(r.distance.distance, 3).c_str(),
                      short_number(r.numerical_error, 2).c_str());
        out << line;
      }
      if (std::isfinite(c->extrapolated_mean_work))
        row("width -> 0", "<W> extrapolated " + e.text(c->extrapolated_mean_work, 6) + " (observed order " +
                              short_number(c->observed_order, 3) + "), hard walls " + e.text(c->hard_mean_work, 6));
    }
  } else {
    out << "\nharmonic reference: none ("
        << (r.harmonic_absent.empty() ? std::string("not applicable to moving walls") : r.harmonic_absent) << ")\n";
  }

  out << "\ndiagnostics\n";
  char line[200];
  for (const auto& c : work_checks(run)) {
    const bool checked = std::isfinite(c.value) && std::isfinite(c.tolerance);
    std::snprintf(line, sizeof line, "  %-20s %10s   tolerance %-10s %s\n", c.name.c_str(), short_number(c.value, 3).c_str(),
                  std::isfinite(c.tolerance) ? short_number(c.tolerance, 3).c_str() : "-",
                  !std::isfinite(c.value) ? "not computed"
                  : !checked              ? "not checked"
                  : !c.pass()             ? "WARN"
                  // a bound this loose makes the check a weak one: say so beside the PASS
                  : c.name == "Jarzynski residual" && c.tolerance > 1e-6 ? "PASS (only to the truncation bound)"
                                                                          : "PASS");
    out << line;
  }
  const auto warnings = work_warnings(run);
  if (!warnings.empty()) {
    out << "\nwarnings\n";
    for (const auto& w : warnings) out << "  - " << w << '\n';
  }
  if (!r.diagnostics.notes.empty()) {
    out << "\nnotes\n";
    for (const auto& n : r.diagnostics.notes) out << "  - " << n << '\n';
  }
  if (const std::string why = traces_absent(run); !why.empty()) out << "\ntime traces: " << why << "\n";

  std::vector<WorkLine> strongest = d.lines;
  std::sort(strongest.begin(), strongest.end(),
            [](const WorkLine& a, const WorkLine& b) { return a.probability > b.probability; });
  // at most 8, and none at the rounding level (a hold's 0 -> 2 line of 3e-21 is no line)
  constexpr double shown_floor = 1e-12;
  const std::size_t above = std::size_t(std::count_if(strongest.begin(), strongest.end(),
                                                      [](const WorkLine& l) { return l.probability >= shown_floor; }));
  strongest.resize(std::min<std::size_t>(above, 8));
  // The pair (m, n) carrying most of each line, and how many more pairs were merged into it.
  auto pairs_of = [&](const WorkLine& l) {
    const auto& f = r.forward;
    const Eigen::MatrixXd& p = f.transitions.probability;
    double best = -1;
    int bm = l.initial, bn = l.final, count = 0;
    for (Eigen::Index m = 0; m < p.rows(); ++m)
      for (Eigen::Index n = 0; n < p.cols(); ++n) {
        const double w = f.final_energies[n] - f.initial_energies[m];
        if (std::abs(w - l.work) > 2 * d.merge_tolerance) continue;
        const double weight = f.initial_weights[std::size_t(m)] * p(m, n);
        if (weight <= 0) continue;
        ++count;
        if (weight > best) {
          best = weight;
          bm = int(m);
          bn = int(n);
        }
      }
    return std::to_string(bm) + " -> " + std::to_string(bn) +
           (count > 1 ? " (+" + std::to_string(count - 1) + " more pairs at this W)" : std::string());
  };
  // W as lines.csv holds it (the same text), P to 4 digits
  out << "\nstrongest work lines (W as in lines.csv)\n";
  std::snprintf(line, sizeof line, "  %24s %24s %12s   %s\n", ("W [" + e.d.e + "]").c_str(),
                e.oscillator() ? "W [hbar*w]" : "", "P", "m -> n");
  out << line;
  for (const auto& l : strongest) {
    std::snprintf(line, sizeof line, "  %24s %24s %12s   %s\n", number_text(e.show(l.work)).c_str(),
                  e.oscillator() ? number_text(conversion_rounded(l.work / e.omega_ref)).c_str() : "",
                  short_number(l.probability, 4).c_str(), pairs_of(l).c_str());
    out << line;
  }
  if (above < 8 && above < d.lines.size())
    out << "  (" << d.lines.size() - above << " more line" << (d.lines.size() - above == 1 ? "" : "s")
        << " below P = 1e-12 not shown: the rounding level)\n";
}

// ---- sweeps ----------------------------------------------------------------------------------

SweepRow failed_sweep_row(const SweepSpec& sweep, std::size_t point, const std::string& message) {
  SweepRow r;
  r.point = point;
  r.values = sweep.point_values(point);
  for (double* x : {&r.mean, &r.sd, &r.mean_error, &r.sd_error, &r.skewness, &r.free_energy_change,
                    &r.dissipated_work, &r.jarzynski_residual, &r.crooks_ratio_error, &r.harmonic_mean,
                    &r.harmonic_sd, &r.time_step_error, &r.unresolved_weight, &r.calibration_mean_sd,
                    &r.calibration_sd_sd, &r.calibration_free_energy_sd, &r.calibration_check})
    *x = nan_value;
  r.failure = message.empty() ? std::string("failed") : message;
  for (char& ch : r.failure)
    if (ch == '\n' || ch == '\r') ch = ' ';  // one line in sweep-points.txt and sweep.csv
  return r;
}

SweepRow sweep_row(const WorkRun& run, const SweepSpec& sweep, std::size_t point) {
  const WorkResult& r = run.result;
  const auto& d = r.distribution;
  SweepRow row;
  row.point = point;
  row.values = sweep.point_values(point);
  row.mean = d.mean;
  row.sd = sd_of(d);
  row.mean_error = r.diagnostics.moments.reported_mean_error();
  row.sd_error = sd_error_of(d, r.diagnostics.moments);
  row.skewness = defined_skewness(d);
  row.free_energy_change = d.free_energy_change;
  row.dissipated_work = d.dissipated_work;
  row.jarzynski_residual = d.jarzynski_residual;
  row.crooks_ratio_error = r.crooks ? r.crooks->max_ratio_error : nan_value;
  row.harmonic_mean = r.harmonic ? r.harmonic->mean_work : nan_value;
  row.harmonic_sd = r.harmonic ? sd_of(r.harmonic->distribution) : nan_value;
  row.time_step_error = r.diagnostics.time_step_error;
  row.unresolved_weight = r.diagnostics.unresolved_weight;
  row.warnings = int(work_warnings(run).size());
  return row;
}

namespace {
std::string sweep_column(const SweepAxis& w) {
  return column_unit(w.parameter) + "_" + (w.unit.empty() ? std::string("internal") : column_unit(w.unit));
}

// The rows in table order: by value for one swept parameter (as given, the values may be in any
// order), else by point number.
void sort_sweep_rows(const SweepSpec& w, std::vector<SweepRow>& rows) {
  if (w.axes.size() == 1)
    std::sort(rows.begin(), rows.end(), [](const SweepRow& a, const SweepRow& b) { return a.values[0] < b.values[0]; });
  else
    std::sort(rows.begin(), rows.end(), [](const SweepRow& a, const SweepRow& b) { return a.point < b.point; });
}
}  // namespace

CsvTable sweep_table(const Scenario& s, std::vector<SweepRow> rows, std::size_t points) {
  const SweepSpec& w = *s.sweep;
  const Display d = display(s);
  sort_sweep_rows(w, rows);
  CsvTable t;
  const std::string ec = d.e_col;
  const bool several = w.axes.size() > 1;
  if (several) t.columns.push_back({"point", {}});
  for (const auto& a : w.axes) t.columns.push_back({sweep_column(a), {}});
  const std::size_t first = t.columns.size();  // the first column after the swept values
  const std::vector<std::string> names = {"mean_work" + ec,
                                          "mean_work_error" + ec,
                                          "sd_work" + ec,
                                          "sd_work_error" + ec,
                                          "skewness",
                                          "free_energy_change" + ec,
                                          "dissipated_work" + ec,
                                          "jarzynski_residual",
                                          "crooks_ratio_error",
                                          "harmonic_mean_work" + ec,
                                          "harmonic_sd_work" + ec,
                                          "time_step_error",
                                          "unresolved_weight",
                                          "warnings",
                                          "failed"};
  for (const auto& n : names) t.columns.push_back({n, {}});
  // With a calibration: its spread of <W>, sd(W) and Delta F, the method and the check.
  const bool calibrated = std::any_of(rows.begin(), rows.end(), [](const SweepRow& r) { return r.calibration_method != 0; });
  if (calibrated)
    for (const auto& n : {"mean_work_calibration_sd" + ec, "sd_work_calibration_sd" + ec,
                          "free_energy_change_calibration_sd" + ec, std::string("calibration_method"),
                          std::string("calibration_linear_minus_sampled_se")})
      t.columns.push_back({n, {}});
  std::vector<std::string> failures;
  for (const auto& r : rows) {
    if (!r.failure.empty()) {
      std::string where;
      for (std::size_t k = 0; k < w.axes.size(); ++k)
        where += (k ? ", " : "") + w.axes[k].parameter + " = " +
                 short_number(r.values[k] / w.axes[k].internal_per_unit, 10) +
                 (w.axes[k].unit.empty() ? "" : " " + w.axes[k].unit);
      failures.push_back("failed: " + (several ? "point " + std::to_string(r.point + 1) + ": " : std::string()) +
                         where + ": " + r.failure);
    }
    std::vector<double> v;
    if (several) v.push_back(double(r.point + 1));
    for (std::size_t k = 0; k < w.axes.size(); ++k)
      v.push_back(conversion_rounded(r.values[k] / w.axes[k].internal_per_unit));
    for (double x :
         {d.energy(r.mean), d.energy(r.mean_error), d.energy(r.sd), d.energy(r.sd_error), r.skewness,
          d.energy(r.free_energy_change), d.energy(r.dissipated_work), r.jarzynski_residual,
          r.crooks_ratio_error, d.energy(r.harmonic_mean), d.energy(r.harmonic_sd), r.time_step_error,
          r.unresolved_weight, double(r.warnings), r.failure.empty() ? 0.0 : 1.0})
      v.push_back(x);
    if (calibrated)
      for (double x : {d.energy(r.calibration_mean_sd), d.energy(r.calibration_sd_sd),
                       d.energy(r.calibration_free_energy_sd),
                       r.calibration_method == 0 ? nan_value : double(r.calibration_method), r.calibration_check})
        v.push_back(x);
    for (std::size_t k = 0; k < t.columns.size(); ++k) t.columns[k].values.push_back(v[k]);
  }
  // Columns of a reference that no point has are empty (a failed point has NaN everywhere).
  auto any = [&](double SweepRow::*member) {
    return std::any_of(rows.begin(), rows.end(), [&](const SweepRow& r) { return std::isfinite(r.*member); });
  };
  t.columns[first + 8].applies = any(&SweepRow::crooks_ratio_error);
  t.columns[first + 9].applies = any(&SweepRow::harmonic_mean);
  t.columns[first + 10].applies = any(&SweepRow::harmonic_sd);
  std::string swept;
  for (const auto& a : w.axes)
    swept += (swept.empty() ? "" : ", ") + a.parameter + " in " + (a.unit.empty() ? std::string("internal units") : a.unit);
  t.comments = {
      "trapwork sweep: " + (s.title.empty() ? s.file : s.title) + "; " + std::to_string(rows.size()) +
          " of " + std::to_string(points) + " points done",
      "swept " + swept +
          (several ? (w.grid ? " (a grid, the first parameter varying slowest; point: the point's "
                               "number, 1-based)"
                             : " (a list of points; point: its number, 1-based)")
                   : std::string()) +
          "; energies in " + d.e +
          "; nan where a value does not exist at a point (no Gibbs state, no harmonic "
          "reference, a failed point); crooks_ratio_error, harmonic_*: empty when no point has them",
      "mean_work_error, sd_work_error: the error estimates trapwork work prints beside <W> and sd(W) (the "
      "level truncation, plus the time step where [work] time_step_check ran; nan: not known)",
      "warnings: number of warnings of that point's run (see trapwork work on the scenario at that value)",
      "failed: 1 where the point could not be computed (numbers nan; its message below; trapwork sweep "
      "--resume "
      "keeps it, --resume --retry-failed computes it again; give them with this run's other options, "
      "--uncertainty FILE included)",
  };
  if (calibrated) {
    const auto linear = std::count_if(rows.begin(), rows.end(), [](const SweepRow& r) { return r.calibration_method == 1; });
    const auto sampled = std::count_if(rows.begin(), rows.end(), [](const SweepRow& r) { return r.calibration_method == 2; });
    const auto checked = std::count_if(rows.begin(), rows.end(), [](const SweepRow& r) { return std::isfinite(r.calibration_check); });
    t.comments.push_back(
        "*_calibration_sd: one standard deviation due to the trap's calibration at that point; calibration_method: 1 "
        "linear propagation (2 runs per parameter), 2 sampling (--uncertainty-samples runs); " +
        std::to_string(linear) + " point(s) linear, " + std::to_string(sampled) + " sampling; "
        "calibration_linear_minus_sampled_se: the largest difference of the linear sd from the sampled one in "
        "standard errors of the sampled sd, where both ran (" + std::to_string(checked) + " point(s)), else nan; an "
        "sd near 1e-10 of the lowest level spacing is the runs' rounding noise, not a spread (e.g. Delta F of a "
        "translation, 0 at any trap frequency)");
  }
  t.comments.insert(t.comments.end(), failures.begin(), failures.end());
  return t;
}

namespace {

// Positive values spanning more than two decades: drawn on a log axis.
bool spans_decades(const std::vector<double>& v) {
  double lo = std::numeric_limits<double>::infinity(), hi = 0;
  for (double x : v) {
    if (!std::isfinite(x)) continue;
    if (!(x > 0)) return false;
    lo = std::min(lo, x);
    hi = std::max(hi, x);
  }
  return hi > 100 * lo;
}

// The harmonic prediction's <W> and sd W at `count` values evenly spread between the sweep's
// ends (log-spaced on a log axis): the analytic model of each point, without its numerical run.
// Values where it does not apply (or the scenario cannot be built) are NaN.
struct DenseHarmonic {
  std::vector<double> x, mean, sd;
  std::string model;
};

// The harmonic prediction's <W> and sd W at the one point whose swept values are `values`
// (internal, one per axis); NaN where it does not apply. `model` receives its name.
std::pair<double, double> harmonic_at(const Scenario& s, const std::vector<double>& values, std::string& model) {
  double mean = nan_value, sd = nan_value;
  try {
    Scenario one = s;
    one.sweep->grid = true;
    for (std::size_t k = 0; k < values.size(); ++k) {
      one.sweep->axes[k].values = {values[k]};
      one.sweep->axes[k].given = {""};
    }
    const Scenario point = at_sweep_point(one, 0);
    std::string why_not;
    if (const auto m = harmonic_moments(point.potential, build_protocol(point), point.work->request.initial, why_not)) {
      mean = m->mean;
      sd = m->sd;
      model = m->model;
    }
  } catch (const std::exception&) {  // a value the scenario refuses: a gap in the curve
  }
  return {mean, sd};
}

DenseHarmonic dense_harmonic(const Scenario& s, double lo, double hi, bool log_spaced, int count) {
  DenseHarmonic h;
  const SweepAxis& w = s.sweep->axes[0];
  if (!s.work || !s.protocol || moves_walls(s)) return h;
  for (int i = 0; i < count; ++i) {
    const double t = double(i) / double(count - 1);
    const double v = log_spaced ? lo * std::pow(hi / lo, t) : lo + (hi - lo) * t;
    const auto [mean, sd] = harmonic_at(s, {v}, h.model);
    h.x.push_back(conversion_rounded(v / w.internal_per_unit));
    h.mean.push_back(mean);
    h.sd.push_back(sd);
  }
  return h;
}

bool any_finite(const std::vector<double>& v) {
  return std::any_of(v.begin(), v.end(), [](double x) { return std::isfinite(x); });
}

}  // namespace

SweepFigure sweep_figure(const Scenario& s, const std::vector<SweepRow>& input) {
  TRAPWORK_EXPECT(s.sweep->axes.size() == 1, "sweep_figure: a sweep of one parameter (several: sweep_map_figures)");
  const SweepAxis& w = s.sweep->axes[0];
  const Display d = display(s);
  std::vector<SweepRow> rows;
  for (const auto& r : input)
    if (r.failure.empty()) rows.push_back(r);  // failed points have no numbers to draw
  sort_sweep_rows(*s.sweep, rows);
  SweepFigure f;
  f.title = "work statistics over the sweep of " + w.parameter;
  const std::string x_unit = !w.unit.empty()                        ? w.unit
                             : w.dimension == Dimension::none() ? std::string("dimensionless")
                                                                : std::string("internal units");
  f.x_label = w.parameter + " (" + x_unit + ")";
  f.y_label = "mean work <W> (" + d.e + ")";
  // No error bars: the spread of W (sd in sweep.csv) is far wider than the departure from
  // the harmonic curve that the departure panel shows; sd W has a panel of its own.
  SweepPoints mean{"numerical", {}, {}, {}};
  SweepPoints sd{"numerical", {}, {}, {}};
  SweepPoints residual{"numerical", {}, {}, {}};
  SweepPoints harmonic_sd{"harmonic prediction at each point", {}, {}, {}};
  std::vector<double> values;
  // With a calibration: a band of +-1 calibration sd around <W> (NaN where not computed: no band there).
  const bool calibrated = std::any_of(rows.begin(), rows.end(), [](const SweepRow& r) { return r.calibration_method != 0; });
  for (const auto& r : rows) {
    const double x = conversion_rounded(r.values[0] / w.internal_per_unit);
    values.push_back(x);
    mean.x.push_back(x);
    mean.y.push_back(d.energy(r.mean));
    // a spread not computed (its runs failed; nan in sweep.csv) draws no width there
    if (calibrated) mean.spread.push_back(std::isfinite(r.calibration_mean_sd) ? d.energy(r.calibration_mean_sd) : 0.0);
    sd.x.push_back(x);
    sd.y.push_back(d.energy(r.sd));
    if (std::isfinite(r.jarzynski_residual)) {
      residual.x.push_back(x);
      residual.y.push_back(std::abs(r.jarzynski_residual));
    }
    if (std::isfinite(r.harmonic_sd)) {
      harmonic_sd.x.push_back(x);
      harmonic_sd.y.push_back(d.energy(r.harmonic_sd));
    }
  }
  f.log_x = spans_decades(values);
  if (calibrated) {
    const bool any_linear = std::any_of(rows.begin(), rows.end(), [](const SweepRow& r) { return r.calibration_method == 1; });
    const bool any_sampled = std::any_of(rows.begin(), rows.end(), [](const SweepRow& r) { return r.calibration_method == 2; });
    mean.label = std::string("numerical; band around <W>: +-1 sd due to the calibration (") +
                 (any_linear && any_sampled ? "linear or sampling, see sweep.csv" : any_linear ? "linear" : "sampling") + ")";
    sd.label = residual.label = mean.label;  // one series, one legend entry (the other panels draw no band)
    f.spread_as_band = true;
  }
  f.points.push_back(mean);
  // The harmonic prediction as a curve: 200 values between the sweep's ends, each the analytic
  // model of the scenario at that value (harmonic_moments), not lines joining the sweep points.
  if (rows.size() >= 2) {
    const DenseHarmonic h = dense_harmonic(s, rows.front().values[0], rows.back().values[0], f.log_x, 200);
    if (any_finite(h.mean)) {
      SweepCurve c{"harmonic prediction, " + h.model, h.x, {}};
      for (double m : h.mean) c.y.push_back(d.energy(m));
      f.curves.push_back(c);
    }
    if (any_finite(h.sd)) {
      SweepCurve c{"harmonic prediction, " + h.model, h.x, {}};
      for (double m : h.sd) c.y.push_back(d.energy(m));
      f.panels.push_back({"sd(W) (" + d.e + ")", {sd}, {c}, false});
    }
  }
  if (f.panels.empty())  // no dense sd: the harmonic sd of each point, as points, where it exists
    f.panels.push_back({"sd(W) (" + d.e + ")", {sd}, {}, false});
  if (f.panels.back().curves.empty() && !harmonic_sd.x.empty()) f.panels.back().points.push_back(harmonic_sd);
  if (!f.curves.empty()) {
    f.departure = Departure::absolute;  // relative fails at the zeros of sin^2(omega tau / 2)
    f.departure_label = "<W> - harmonic <W> (" + d.e + ")";
  }
  if (!residual.x.empty())
    f.panels.push_back({"|Jarzynski residual| (dimensionless)", {residual}, {}, spans_decades(residual.y)});
  f.log_y = spans_decades(mean.y);
  f.panels.front().log_y = spans_decades(f.panels.front().points.front().y);
  return f;
}

std::vector<fs::path> plot_sweep_figure(const fs::path& folder, const Scenario& s, const std::vector<SweepRow>& rows) {
  if (s.sweep->axes.size() != 1) return plot_sweep_maps(folder, s, rows);
  return plot_sweep(folder / "sweep", sweep_figure(s, rows));
}

namespace {

// A piece of a file name from a parameter or a value as written: letters, digits, '.' and '-'
// kept, every run of other characters one '_' ("0.01 h*Hz/nm^4" -> "0.01_h_Hz_nm_4").
std::string file_piece(const std::string& text) {
  std::string out;
  for (char c : text) {
    if (std::isalnum(static_cast<unsigned char>(c)) || c == '.' || c == '-')
      out += c;
    else if (!out.empty() && out.back() != '_')
      out += '_';
  }
  while (!out.empty() && out.back() == '_') out.pop_back();
  return out;
}

std::string axis_label(const SweepAxis& axis) {
  return axis.parameter + " (" +
         (!axis.unit.empty() ? axis.unit : axis.dimension == Dimension::none() ? "dimensionless" : "internal units") + ")";
}

// The harmonic prediction of <W> and sd(W) on a 40 x 40 grid over [x0, x1] x [y0, y1] (display
// units of the axes a and b), with the values `rest` (internal) of the further axes, as the
// contours of `mean` and `sd` where it exists at every node (a partial prediction is not drawn).
void add_harmonic_contours(const Scenario& s, const SweepAxis& a, const SweepAxis& b, const std::vector<double>& rest,
                           double x0, double x1, double y0, double y1, SweepMapFigure& mean, SweepMapFigure& sd) {
  if (!(x1 > x0 && y1 > y0)) return;
  const Display d = display(s);
  constexpr int n = 40;
  std::vector<double> cx, cy;
  for (int i = 0; i < n; ++i) {
    cx.push_back(x0 + (x1 - x0) * i / (n - 1));
    cy.push_back(y0 + (y1 - y0) * i / (n - 1));
  }
  std::vector<std::vector<double>> hm(n, std::vector<double>(n)), hs = hm;
  std::string model;
  bool complete = true;
  for (int i = 0; i < n && complete; ++i)
    for (int j = 0; j < n && complete; ++j) {
      std::vector<double> values = {cx[i] * a.internal_per_unit, cy[j] * b.internal_per_unit};
      values.insert(values.end(), rest.begin(), rest.end());
      const auto [m, sdv] = harmonic_at(s, values, model);
      hm[i][j] = d.energy(m);
      hs[i][j] = d.energy(sdv);
      complete = std::isfinite(hm[i][j]) && std::isfinite(hs[i][j]);
    }
  if (!complete) return;
  mean.contour_x = sd.contour_x = cx;
  mean.contour_y = sd.contour_y = cy;
  mean.contour_z = hm;
  sd.contour_z = hs;
  mean.contour_label = "harmonic prediction of <W>, " + model;
  sd.contour_label = "harmonic prediction of sd(W), " + model;
}

// The three figures of a map (mean, sd, Jarzynski) named and titled alike: the Jarzynski map
// only where a residual is finite.
std::vector<SweepMapFigure> map_triple(const Scenario& s, const std::string& suffix, const std::string& over,
                                       SweepMapFigure mean) {
  const Display d = display(s);
  mean.stem = "sweep_map_mean" + suffix;
  mean.title = "mean work <W> " + over;
  mean.colour_label = "<W> (" + d.e + ")";
  SweepMapFigure sd = mean, jarzynski = mean;
  sd.stem = "sweep_map_sd" + suffix;
  sd.title = "spread of the work sd(W) " + over;
  sd.colour_label = "sd(W) (" + d.e + ")";
  jarzynski.stem = "sweep_map_jarzynski" + suffix;
  jarzynski.title = "Jarzynski residual " + over;
  jarzynski.colour_label = "|Jarzynski residual| (dimensionless)";
  jarzynski.contour_x.clear();
  jarzynski.contour_y.clear();
  jarzynski.contour_z.clear();
  jarzynski.contour_label.clear();
  return {mean, sd, jarzynski};
}

// The file-name suffix and title words of value k of the third axis of a three-parameter grid.
std::string slice_suffix(const SweepAxis& third, std::size_t k) {
  return "_" + file_piece(third.parameter) + "_" + file_piece(third.given[k]);
}

// The grid maps over axes 0 and 1 of the rows given (all of a two-parameter grid, or those of
// value `slice` of the third axis).
std::vector<SweepMapFigure> grid_maps(const Scenario& s, const std::vector<SweepRow>& rows,
                                      std::optional<std::size_t> slice) {
  const SweepSpec& w = *s.sweep;
  const Display d = display(s);
  const SweepAxis &a = w.axes[0], &b = w.axes[1];
  // The axes' values in display units, ascending, and where each point's cell is.
  auto ascending = [](const SweepAxis& axis, std::vector<std::size_t>& order) {
    order.resize(axis.values.size());
    for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
    std::sort(order.begin(), order.end(), [&](std::size_t i, std::size_t j) { return axis.values[i] < axis.values[j]; });
    std::vector<double> v;
    for (std::size_t i : order) v.push_back(conversion_rounded(axis.values[i] / axis.internal_per_unit));
    std::vector<std::size_t> cell(order.size());
    for (std::size_t k = 0; k < order.size(); ++k) cell[order[k]] = k;
    order = cell;
    return v;
  };
  std::vector<std::size_t> cell_a, cell_b;
  const std::vector<double> x = ascending(a, cell_a), y = ascending(b, cell_b);
  for (std::size_t i = 1; i < x.size(); ++i)
    if (!(x[i] > x[i - 1])) return {};  // repeated values: no map
  for (std::size_t i = 1; i < y.size(); ++i)
    if (!(y[i] > y[i - 1])) return {};
  const std::vector<std::vector<double>> blank(x.size(), std::vector<double>(y.size(), nan_value));
  std::string over = "over " + a.parameter + " and " + b.parameter, suffix;
  std::vector<double> rest;
  if (slice) {
    const SweepAxis& third = w.axes[2];
    std::string value = third.given[*slice];
    value.erase(std::remove(value.begin(), value.end(), '"'), value.end());  // as written, without its quotes
    over = "at " + third.parameter + " = " + value;  // the axes name the other two
    suffix = slice_suffix(third, *slice);
    rest = {third.values[*slice]};
  }
  SweepMapFigure base{"", "", axis_label(a), axis_label(b), "", x, y, blank, {}, {}, {}, "", {}, {}, {}};
  auto maps = map_triple(s, suffix, over, base);
  if (x.size() >= 2 && y.size() >= 2)
    add_harmonic_contours(s, a, b, rest, x.front(), x.back(), y.front(), y.back(), maps[0], maps[1]);
  bool any = false, jarzynski = false;
  for (const auto& r : rows) {
    if (!r.failure.empty()) continue;
    if (slice && w.value_index(r.point, 2) != *slice) continue;
    const std::size_t i = cell_a[w.value_index(r.point, 0)], j = cell_b[w.value_index(r.point, 1)];
    maps[0].z[i][j] = d.energy(r.mean);
    maps[1].z[i][j] = d.energy(r.sd);
    maps[2].z[i][j] = std::abs(r.jarzynski_residual);
    any = true;
    jarzynski = jarzynski || std::isfinite(maps[2].z[i][j]);
  }
  if (!any) return {};
  if (!jarzynski) maps.pop_back();
  return maps;
}

// The scatter maps of a two-parameter list of points: a marker per computed point.
std::vector<SweepMapFigure> scatter_maps(const Scenario& s, const std::vector<SweepRow>& rows) {
  const SweepSpec& w = *s.sweep;
  const Display d = display(s);
  const SweepAxis &a = w.axes[0], &b = w.axes[1];
  SweepMapFigure base{"", "", axis_label(a), axis_label(b), "", {}, {}, {}, {}, {}, {}, "", {}, {}, {}};
  auto maps = map_triple(s, "", "at the listed points of " + a.parameter + " and " + b.parameter, base);
  bool any = false, jarzynski = false;
  double x0 = inf_value, x1 = -inf_value, y0 = inf_value, y1 = -inf_value;
  for (const auto& r : rows) {
    const double x = conversion_rounded(w.value(r.point, 0) / a.internal_per_unit);
    const double y = conversion_rounded(w.value(r.point, 1) / b.internal_per_unit);
    const bool ok = r.failure.empty();
    const double z[3] = {ok ? d.energy(r.mean) : nan_value, ok ? d.energy(r.sd) : nan_value,
                         ok ? std::abs(r.jarzynski_residual) : nan_value};
    for (int k = 0; k < 3; ++k) {
      maps[std::size_t(k)].point_x.push_back(x);
      maps[std::size_t(k)].point_y.push_back(y);
      maps[std::size_t(k)].point_z.push_back(z[k]);
    }
    any = any || ok;
    jarzynski = jarzynski || std::isfinite(z[2]);
    x0 = std::min(x0, x), x1 = std::max(x1, x), y0 = std::min(y0, y), y1 = std::max(y1, y);
  }
  if (!any) return {};
  add_harmonic_contours(s, a, b, {}, x0, x1, y0, y1, maps[0], maps[1]);
  if (!jarzynski) maps.pop_back();
  return maps;
}

}  // namespace

std::string sweep_map_refusal(const Scenario& s) {
  const SweepSpec& w = *s.sweep;
  const std::size_t n = w.axes.size();
  if (n == 1) return "one parameter (sweep.png instead)";
  if (n > 3) return std::to_string(n) + " parameters (maps are drawn for two parameters, or a grid of three)";
  if (n == 3 && !w.grid)
    return "a list of points over three parameters (maps are drawn for two parameters, or a grid of three: one map "
           "per value of the third)";
  if (w.grid) {
    for (std::size_t k = 0; k < n; ++k) {
      std::vector<double> v = w.axes[k].values;
      std::sort(v.begin(), v.end());
      if (std::adjacent_find(v.begin(), v.end()) != v.end())
        return "a value of " + w.axes[k].parameter + " repeated on the grid";
    }
    if (n == 3)
      for (std::size_t i = 0; i < w.axes[2].given.size(); ++i)
        for (std::size_t j = 0; j < i; ++j)
          if (slice_suffix(w.axes[2], i) == slice_suffix(w.axes[2], j))
            return "the values " + w.axes[2].given[j] + " and " + w.axes[2].given[i] + " of " + w.axes[2].parameter +
                   " give one file name";
    return "";
  }
  std::vector<std::pair<double, double>> at;
  for (std::size_t p = 0; p < w.points(); ++p) at.emplace_back(w.value(p, 0), w.value(p, 1));
  std::sort(at.begin(), at.end());
  if (std::adjacent_find(at.begin(), at.end()) != at.end())
    return "two points of the list at the same values of " + w.axes[0].parameter + " and " + w.axes[1].parameter;
  return "";
}

std::vector<std::string> sweep_map_names(const Scenario& s) {
  std::vector<std::string> names;
  if (!s.sweep || !sweep_map_refusal(s).empty()) return names;
  std::vector<std::string> suffixes = {""};
  if (s.sweep->axes.size() == 3) {
    suffixes.clear();
    for (std::size_t k = 0; k < s.sweep->axes[2].values.size(); ++k) suffixes.push_back(slice_suffix(s.sweep->axes[2], k));
  }
  for (const char* stem : {"sweep_map_mean", "sweep_map_sd", "sweep_map_jarzynski"})
    for (const auto& suffix : suffixes)
      for (const char* ext : {".png", ".svg"}) names.push_back(std::string(stem) + suffix + ext);
  return names;
}

std::vector<SweepMapFigure> sweep_map_figures(const Scenario& s, const std::vector<SweepRow>& rows) {
  const SweepSpec& w = *s.sweep;
  if (!sweep_map_refusal(s).empty()) return {};
  if (!w.grid) return scatter_maps(s, rows);
  if (w.axes.size() == 2) return grid_maps(s, rows, std::nullopt);
  std::vector<SweepMapFigure> maps;
  for (std::size_t k = 0; k < w.axes[2].values.size(); ++k)
    for (auto& m : grid_maps(s, rows, k)) maps.push_back(std::move(m));
  return maps;
}

std::vector<fs::path> plot_sweep_maps(const fs::path& folder, const Scenario& s, const std::vector<SweepRow>& rows) {
  std::vector<fs::path> files;
  for (const auto& m : sweep_map_figures(s, rows))
    for (const auto& p : plot_sweep_map(folder / m.stem, m)) files.push_back(p);
  return files;
}

}  // namespace trapwork
