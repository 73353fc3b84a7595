#include "solver/design.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <exception>
#include <limits>
#include <Eigen/Dense>
#include <nlopt.hpp>
#include <random>

#include "solver/errors.hpp"

namespace trapwork {

namespace {
constexpr double pi = 3.14159265358979323846;

std::string exact(double x) {
  char buffer[40];
  std::snprintf(buffer, sizeof buffer, "%.17g", x);
  return buffer;
}
std::string digits10(double x) {  // for messages: exact() is for formulas that must round-trip
  char buffer[40];
  std::snprintf(buffer, sizeof buffer, "%.10g", x);
  return buffer;
}

double base_ramp(double u, bool smoother) {
  return smoother ? u * u * u * (10 + u * (-15 + 6 * u)) : u * u * (3 - 2 * u);
}

double mode(int k, double u) {
  const double s = std::sin(pi * u);
  return s * s * std::sin(k * pi * u);
}

// d/du of base_ramp and of mode.
double base_ramp_slope(double u, bool smoother) {
  return smoother ? 30 * u * u * (1 - u) * (1 - u) : 6 * u * (1 - u);
}
double mode_slope(int k, double u) {
  const double s = std::sin(pi * u), c = std::cos(pi * u);
  return 2 * pi * s * c * std::sin(k * pi * u) + s * s * k * pi * std::cos(k * pi * u);
}
constexpr int bound_points = 512;  // the bounds are checked at u = i / 512

// An objective value for a warning: an energy for the dissipated work (in the scenario's unit
// where options.message_units has it), else the plain number.
std::string objective_text(double v, const DesignOptions& options) {
  return options.objective == DesignObjective::dissipated_work ? options.message_units(v, Dimension::energy())
                                                               : digits10(v);
}

nlopt::algorithm nlopt_algorithm(DesignMethod method) {
  switch (method) {
    case DesignMethod::bobyqa: return nlopt::LN_BOBYQA;
    case DesignMethod::cobyla: return nlopt::LN_COBYLA;
    case DesignMethod::nelder_mead: return nlopt::LN_NELDERMEAD;
    case DesignMethod::sbplx: return nlopt::LN_SBPLX;
  }
  return nlopt::LN_BOBYQA;
}

std::string ending(nlopt::result r) {
  switch (r) {
    case nlopt::STOPVAL_REACHED: return "reached the stop value";
    case nlopt::FTOL_REACHED: return "objective converged";
    case nlopt::XTOL_REACHED: return "amplitudes converged";
    case nlopt::MAXEVAL_REACHED: return "used its share of the evaluations";
    case nlopt::ROUNDOFF_LIMITED: return "limited by rounding";
    case nlopt::FORCED_STOP: return "stopped";
    default: return "ended (NLopt code " + std::to_string(int(r)) + ")";
  }
}
}  // namespace

DesignObjective design_objective_from_name(const std::string& name) {
  if (name == "excitation") return DesignObjective::excitation;
  if (name == "dissipated_work") return DesignObjective::dissipated_work;
  if (name == "quanta") return DesignObjective::quanta;
  throw InputError("objective", name, "excitation, dissipated_work or quanta");
}
std::string design_objective_name(DesignObjective objective) {
  switch (objective) {
    case DesignObjective::excitation: return "excitation";
    case DesignObjective::dissipated_work: return "dissipated_work";
    case DesignObjective::quanta: return "quanta";
  }
  return "excitation";
}
DesignMethod design_method_from_name(const std::string& name) {
  if (name == "bobyqa") return DesignMethod::bobyqa;
  if (name == "cobyla") return DesignMethod::cobyla;
  if (name == "nelder_mead") return DesignMethod::nelder_mead;
  if (name == "sbplx") return DesignMethod::sbplx;
  throw InputError("method", name, "bobyqa, cobyla, nelder_mead or sbplx");
}
std::string design_method_name(DesignMethod method) {
  switch (method) {
    case DesignMethod::bobyqa: return "bobyqa";
    case DesignMethod::cobyla: return "cobyla";
    case DesignMethod::nelder_mead: return "nelder_mead";
    case DesignMethod::sbplx: return "sbplx";
  }
  return "bobyqa";
}

DesignFamily::DesignFamily(const Protocol& protocol, int modes, bool zero_end_acceleration)
    : protocol_(protocol), modes_(modes), smoother_(zero_end_acceleration) {
  const double tau = protocol.duration();
  if (!(tau > 0)) throw InputError("protocol.duration", exact(tau), "a duration > 0 to design a ramp over");
  if (protocol.is_time_reversed()) throw ContractViolation("DesignFamily: a reversed protocol");
  if (modes < 1 || modes > 20) throw InputError("modes", std::to_string(modes), "1 to 20 modes");
  for (const auto& s : protocol.schedules()) {
    const double a = s.initial_value(tau), b = s.final_value(tau);
    if (s.form() != ScheduleForm::constant && a != b) parameters_.push_back({s.address(), a, b});
  }
  if (parameters_.empty())
    throw InputError("protocol.change", "no parameter whose end values differ",
                     "a change with different end values (from and to) to design");
}

double DesignFamily::value(std::size_t p, const std::vector<double>& c, double u) const {
  const auto& d = parameters_.at(p);
  double shape = base_ramp(u, smoother_);
  for (int k = 1; k <= modes_; ++k) shape += c.at(p * modes_ + k - 1) * mode(k, u);
  return d.from + (d.to - d.from) * shape;
}

double DesignFamily::rate(std::size_t p, const std::vector<double>& c, double u) const {
  const auto& d = parameters_.at(p);
  double slope = base_ramp_slope(u, smoother_);
  for (int k = 1; k <= modes_; ++k) slope += c.at(p * modes_ + k - 1) * mode_slope(k, u);
  return (d.to - d.from) * slope / protocol_.duration();
}

double DesignFamily::max_speed(std::size_t p, const std::vector<double>& c) const {
  double top = 0;
  for (int i = 0; i <= bound_points; ++i) top = std::max(top, std::abs(rate(p, c, double(i) / bound_points)));
  return top;
}

double DesignFamily::max_overshoot(std::size_t p, const std::vector<double>& c) const {
  const auto& d = parameters_.at(p);
  const double lo = std::min(d.from, d.to), hi = std::max(d.from, d.to);
  double top = 0;
  for (int i = 0; i <= bound_points; ++i) {
    const double v = value(p, c, double(i) / bound_points);
    top = std::max(top, std::max(lo - v, v - hi));
  }
  return top;
}

double DesignFamily::bound_excess(const std::vector<double>& c, double overshoot,
                                  const std::vector<DesignBound>& bounds) const {
  double worst = 0;
  for (std::size_t p = 0; p < parameters_.size(); ++p) {
    const auto& d = parameters_[p];
    const double span = std::abs(d.to - d.from);
    double band = overshoot * span, speed = std::numeric_limits<double>::infinity();
    for (const auto& b : bounds)
      if (b.address == d.address) {
        band = std::min(band, b.max_overshoot);
        speed = std::min(speed, b.max_speed);
      }
    worst = std::max(worst, (max_overshoot(p, c) - band) / span);
    if (std::isfinite(speed)) worst = std::max(worst, max_speed(p, c) / speed - 1);
  }
  return worst;
}

double DesignFamily::overshoot_excess(const std::vector<double>& c, double overshoot) const {
  double worst = 0;
  for (std::size_t p = 0; p < parameters_.size(); ++p) {
    const auto& d = parameters_[p];
    const double span = std::abs(d.to - d.from);
    const double lo = std::min(d.from, d.to) - overshoot * span, hi = std::max(d.from, d.to) + overshoot * span;
    for (int i = 0; i <= 512; ++i) {
      const double v = value(p, c, i / 512.0);
      worst = std::max(worst, std::max(lo - v, v - hi) / span);
    }
  }
  return worst;
}

Protocol DesignFamily::protocol(const std::vector<double>& c) const {
  if (int(c.size()) != dimension()) throw ContractViolation("DesignFamily::protocol: wrong number of amplitudes");
  std::vector<Schedule> schedules;
  for (const auto& s : protocol_.schedules()) {
    auto it = std::find_if(parameters_.begin(), parameters_.end(),
                           [&](const DesignedParameter& d) { return d.address == s.address(); });
    if (it == parameters_.end()) {
      schedules.push_back(s);
      continue;
    }
    const std::size_t p = std::size_t(it - parameters_.begin());
    // appended piece by piece: g++ 12 warns (-Wrestrict, a known false positive) on
    // "(" + std::string&& here
    std::string expression = "(";
    expression += exact(it->from);
    expression += ")+(";
    expression += exact(it->to - it->from);
    expression += ")*(";
    expression += shape_expression(p, c);
    expression += ")";
    schedules.push_back(Schedule::formula(s.address(), expression));
  }
  return Protocol(protocol_.duration(), std::move(schedules));
}

std::string DesignFamily::shape_expression(std::size_t p, const std::vector<double>& c) const {
  if (int(c.size()) != dimension() || p >= parameters_.size())
    throw ContractViolation("DesignFamily::shape_expression: wrong parameter or number of amplitudes");
  const std::string u = "(t/tau)";
  std::string shape = smoother_ ? u + "^3*(10+" + u + "*(-15+6*" + u + "))" : u + "^2*(3-2*" + u + ")";
  const std::string w = "sin(" + exact(pi) + "*" + u + ")^2";
  for (int k = 1; k <= modes_; ++k) {
    const double a = c[p * std::size_t(modes_) + std::size_t(k) - 1];
    if (a == 0) continue;
    shape += "+(" + exact(a) + ")*" + w + "*sin(" + std::to_string(k) + "*" + exact(pi) + "*" + u + ")";
  }
  return shape;
}

std::string DesignFamily::description() const {
  return std::string(smoother_ ? "smoother step 10u^3 - 15u^4 + 6u^5" : "smooth step 3u^2 - 2u^3") +
         " plus sum_k c_k sin^2(pi u) sin(k pi u), k = 1.." + std::to_string(modes_) +
         ", in units of the change";
}

double design_objective(const WorkResult& result, DesignObjective objective) {
  const WorkInput& in = result.forward;
  if (objective == DesignObjective::dissipated_work) {
    if (!in.beta) throw PhysicsError("the dissipated work <W> - Delta F needs a thermal initial state (temperature or mean phonon number); use the objective excitation");
    return result.distribution.dissipated_work;
  }
  const auto& P = in.transitions.probability;
  if (objective == DesignObjective::quanta) {
    const int kept = in.transitions.final_levels();
    double quanta = 0;
    for (int m = 0; m < in.transitions.initial_levels(); ++m) {
      const double p = in.initial_weights.at(std::size_t(m));
      if (p == 0) continue;
      double found = 0;
      for (int n = 0; n < kept; ++n) {
        quanta += p * P(m, n) * (n - m);
        found += P(m, n);
      }
      quanta += p * std::max(0.0, 1 - found) * (kept - m);  // unresolved: at level >= kept
    }
    return quanta;
  }
  double stay = 0;
  for (int m = 0; m < in.transitions.initial_levels(); ++m) {
    const double p = in.initial_weights.at(std::size_t(m));
    if (p == 0) continue;
    if (m >= in.transitions.final_levels())
      throw PhysicsError("the excitation needs the final level " + std::to_string(m) + ", which the run did not compute");
    stay += p * P(m, m);
  }
  return 1 - stay;
}

DesignEvaluator work_evaluator(Potential base, WorkRequest request, DesignObjective objective) {
  request.reverse_run = false;
  request.time_step_check = false;
  request.grid_check = false;
  request.spectrum.convergence_check = false;
  request.trace_points = 0;
  return [base = std::move(base), request = std::move(request), objective](const Protocol& protocol) {
    return design_objective(run_work(base, protocol, request), objective);
  };
}

DesignEvaluator wall_evaluator(WallProtocol walls, WallWorkRequest request, DesignObjective objective) {
  request.reverse_run = false;
  request.time_step_check = false;
  request.grid_check = false;
  request.progress = nullptr;
  return [walls = std::move(walls), request = std::move(request), objective](const Protocol& protocol) {
    Schedule left = walls.left(), right = walls.right();
    std::vector<Schedule> inner;
    for (const auto& s : protocol.schedules()) {
      if (s.address() == walls.left().address())
        left = s;
      else if (s.address() == walls.right().address())
        right = s;
      else
        inner.push_back(s);
    }
    const WallProtocol member(protocol.duration(), std::move(left), std::move(right), walls.inner(), std::move(inner));
    return design_objective(run_wall_work(member, request).work, objective);
  };
}

DesignResult design_protocol(const DesignFamily& family, const DesignEvaluator& evaluate,
                             const DesignOptions& options, const DesignHooks& hooks) {
  if (!(options.amplitude_bound > 0) || !std::isfinite(options.amplitude_bound))
    throw InputError("amplitude_bound", exact(options.amplitude_bound), "a bound > 0 on the mode amplitudes");
  if (!(options.overshoot >= 0) || !std::isfinite(options.overshoot))
    throw InputError("overshoot", exact(options.overshoot), "an overshoot >= 0 (units of the change)");
  for (const auto& b : options.bounds) {
    const auto& ps = family.parameters();
    const auto it = std::find_if(ps.begin(), ps.end(), [&](const DesignedParameter& d) { return d.address == b.address; });
    if (it == ps.end()) throw InputError("max_speed", b.address, "a designed parameter (one whose end values differ)");
    if (!(b.max_speed > 0)) throw InputError("max_speed", exact(b.max_speed), "a speed bound > 0");
    if (!(b.max_overshoot >= 0)) throw InputError("max_overshoot", exact(b.max_overshoot), "an overshoot bound >= 0");
    // Mean value theorem: some point of any member moves at |b - a| / tau at least.
    const double least = std::abs(it->to - it->from) / family.duration();
    if (b.max_speed < least)
      throw InputError("max_speed", exact(b.max_speed) + " (internal units) for " + b.address,
                       "at least the mean speed |to - from| / duration = " + exact(least) +
                           " (internal units): no ramp of this duration is slower everywhere",
                       "a larger bound or a longer duration");
  }
  if (std::isnan(options.stop_below))  // NaN would never stop a start, silently
    throw InputError("stop_below", exact(options.stop_below), "a number (the objective at which a start ends)");
  if (options.starts < 1) throw InputError("starts", std::to_string(options.starts), "at least 1 start");
  if (options.runs_per_evaluation < 1)
    throw InputError("runs_per_evaluation", std::to_string(options.runs_per_evaluation), "at least 1 work run per evaluation");
  const int cost = options.runs_per_evaluation;  // work runs charged per evaluation
  if (options.max_evaluations < options.starts * cost)
    throw InputError("evaluations", std::to_string(options.max_evaluations),
                     "at least one evaluation per start: " + std::to_string(options.starts) + " start(s) of " +
                         std::to_string(cost) + " work run(s) each" +
                         (cost > 1 ? " (one per member of the robust design)" : ""));
  const int n = family.dimension();
  if (!options.first_start.empty() && int(options.first_start.size()) != n)
    throw InputError("first_start", std::to_string(options.first_start.size()) + " amplitudes",
                     std::to_string(n) + " amplitudes (modes times designed parameters)");
  if (options.method == DesignMethod::bobyqa && n < 2)
    throw InputError("modes", std::to_string(options.modes), "at least 2 amplitudes for bobyqa (NLopt); more modes or another method");

  DesignResult result;
  result.parameters = family.parameters();
  result.modes = family.modes();
  double largest = 1;  // largest feasible objective so far (penalties stay above it)
  std::exception_ptr failure;
  bool bound_hit = false;

  auto run_one = [&](const std::vector<double>& c, int start) {
    for (const auto& e : result.history)  // a point asked again (NLopt's first is the start) costs no run
      if (e.amplitudes == c) return e.objective;
    if (hooks.interrupt) hooks.interrupt();
    DesignEvaluation e;
    e.index = int(result.history.size());
    e.start = start;
    e.amplitudes = c;
    e.excess = family.bound_excess(c, options.overshoot, options.bounds);
    e.feasible = e.excess <= 0;
    if (e.feasible || e.index == 0) {  // the smooth ramp is simulated in any case (objective_before)
      e.objective = evaluate(family.protocol(c));
      if (!std::isfinite(e.objective)) throw PhysicsError("the objective is not finite for amplitudes " + exact(c.empty() ? 0 : c[0]) + "...");
      largest = std::max(largest, e.objective);
      if (e.index == 0) result.objective_before = e.objective;
      if (!e.feasible) e.objective = largest + 1 + e.excess;  // the search sees the penalty
    } else {
      e.objective = largest + 1 + e.excess;
    }
    result.history.push_back(e);
    result.work_runs = int(result.history.size()) * cost;
    if (hooks.progress) hooks.progress(result.history.back(), result.work_runs, options.max_evaluations);
    return e.objective;
  };

  run_one(std::vector<double>(std::size_t(n), 0.0), 0);  // the smooth ramp, objective_before
  std::mt19937_64 random(options.seed);
  std::uniform_real_distribution<double> uniform(-0.5 * options.amplitude_bound, 0.5 * options.amplitude_bound);
  for (int start = 0; start < options.starts && !bound_hit; ++start) {
    std::vector<double> x(std::size_t(n), 0.0);
    if (start == 0 && !options.first_start.empty()) {
      x = options.first_start;
      for (auto& v : x) v = std::clamp(v, -options.amplitude_bound, options.amplitude_bound);
    }
    if (start > 0)
      for (auto& v : x) v = uniform(random);
    const int left = options.max_evaluations - int(result.history.size()) * cost;  // work runs
    const int share = std::max(cost, left / (options.starts - start));
    nlopt::opt opt(nlopt_algorithm(options.method), unsigned(n));
    opt.set_lower_bounds(std::vector<double>(std::size_t(n), -options.amplitude_bound));
    opt.set_upper_bounds(std::vector<double>(std::size_t(n), options.amplitude_bound));
    opt.set_stopval(options.stop_below);
    opt.set_xtol_abs(1e-12 * options.amplitude_bound);
    opt.set_initial_step(0.1 * options.amplitude_bound);
    // Evaluations are counted here, not by NLopt: a point asked again costs no run.
    struct Context {
      decltype(run_one)* run;
      int start;
      std::exception_ptr* failure;
      bool* bound_hit;
      bool share_used = false;
      int bound, share, begin, cost;
      const std::vector<DesignEvaluation>* history;
    } context{&run_one, start, &failure, &bound_hit, false, options.max_evaluations, share,
              int(result.history.size()), cost, &result.history};
    opt.set_min_objective(
        [](const std::vector<double>& c, std::vector<double>&, void* data) -> double {
          auto& ctx = *static_cast<Context*>(data);
          for (const auto& e : *ctx.history)
            if (e.amplitudes == c) return e.objective;
          if ((int(ctx.history->size()) + 1) * ctx.cost > ctx.bound) {  // the next one would pass it
            *ctx.bound_hit = true;
            throw nlopt::forced_stop();
          }
          if ((int(ctx.history->size()) - ctx.begin + 1) * ctx.cost > ctx.share) {
            ctx.share_used = true;
            throw nlopt::forced_stop();
          }
          try {
            return (*ctx.run)(c, ctx.start);
          } catch (...) {
            *ctx.failure = std::current_exception();
            throw nlopt::forced_stop();
          }
        },
        &context);
    double value = 0;
    nlopt::result r = nlopt::FAILURE;
    try {
      r = opt.optimize(x, value);
    } catch (const nlopt::forced_stop&) {
      r = nlopt::FORCED_STOP;
    } catch (const nlopt::roundoff_limited&) {
      r = nlopt::ROUNDOFF_LIMITED;
    } catch (const std::runtime_error& e) {
      if (failure) std::rethrow_exception(failure);
      throw PhysicsError(std::string("the optimiser (NLopt) failed: ") + e.what());
    }
    if (failure) std::rethrow_exception(failure);
    result.start_results.push_back(r != nlopt::FORCED_STOP ? ending(r)
                                   : bound_hit         ? "stopped at the evaluation bound"
                                                       : "used its share of the evaluations");
  }

  // The smooth ramp is the first evaluation (objective_before, simulated even when it breaks a bound).
  result.before_feasible = result.history.front().feasible;
  const DesignEvaluation* best = nullptr;
  for (const auto& e : result.history)
    if (e.feasible && (!best || e.objective < best->objective)) best = &e;
  if (!best)
    throw NoFeasibleDesign("no member of the " + std::to_string(result.history.size()) +
                       " evaluated met the bounds on speed and overshoot (least excess " +
                       exact(std::min_element(result.history.begin(), result.history.end(),
                                              [](const DesignEvaluation& a, const DesignEvaluation& b) {
                                                return a.excess < b.excess;
                                              })->excess) +
                       "); loosen the bounds, lengthen the duration or allow more evaluations",
                       result);
  result.amplitudes = best->amplitudes;
  result.objective_after = best->objective;
  result.bound_reached = bound_hit;
  if (bound_hit && !(result.objective_after < options.stop_below))
    result.warnings.push_back("the evaluation bound (" + std::to_string(options.max_evaluations) + " work runs" +
                              ") ended the search at objective " + objective_text(result.objective_after, options) +
                              ": more evaluations may lower it");
  if (!result.before_feasible)
    result.warnings.push_back("the smooth ramp breaks the bounds (excess " + exact(result.history.front().excess) +
                              "); its objective is given for comparison only");
  if (!(result.objective_after < result.objective_before))
    result.warnings.push_back("no member beat the smooth ramp (objective " +
                              objective_text(result.objective_before, options) + ")");
  return result;
}

DesignEvaluator averaged_evaluator(std::vector<DesignEvaluator> members, PartSharing sharing) {
  if (members.empty()) throw ContractViolation("averaged_evaluator: no members");
  return [members = std::move(members), sharing = std::move(sharing)](const Protocol& protocol) {
    double sum = 0;
    if (!sharing.shared()) {
      for (const auto& m : members) sum += m(protocol);
    } else {
      const auto parts = shared_parts(sharing, 0, members.size(), 1,
                                      [&](std::size_t i) { return std::vector<double>{members[i](protocol)}; });
      for (const auto& part : parts) sum += part[0];  // the members' order, as above
    }
    return sum / double(members.size());
  };
}

std::vector<std::vector<double>> gaussian_samples(const std::vector<double>& mean,
                                                  const std::vector<std::vector<double>>& covariance, int count,
                                                  std::uint64_t seed) {
  const std::size_t n = mean.size();
  if (covariance.size() != n) throw InputError("covariance", std::to_string(covariance.size()) + " rows", std::to_string(n) + " rows");
  Eigen::MatrixXd c{Eigen::Index(n), Eigen::Index(n)};
  double largest = 0;
  for (std::size_t i = 0; i < n; ++i) {
    if (covariance[i].size() != n) throw InputError("covariance", "a row of " + std::to_string(covariance[i].size()), "a square matrix");
    for (std::size_t j = 0; j < n; ++j) c(Eigen::Index(i), Eigen::Index(j)) = covariance[i][j];
    largest = std::max(largest, std::abs(covariance[i][i]));
  }
  if (!c.allFinite() || (c - c.transpose()).cwiseAbs().maxCoeff() > 1e-12 * std::max(largest, 1e-300))
    throw InputError("covariance", "a matrix that is not symmetric or not finite", "a symmetric covariance");
  const Eigen::LDLT<Eigen::MatrixXd> ldlt(c);
  Eigen::VectorXd d = ldlt.vectorD();
  if (d.size() && d.minCoeff() < -1e-12 * largest)
    throw InputError("covariance", "a pivot " + exact(d.minCoeff()), "a positive semi-definite covariance");
  for (Eigen::Index i = 0; i < d.size(); ++i)  // pivots within rounding of 0 are 0 (exact correlations)
    d(i) = d(i) > 1e-12 * largest ? std::sqrt(d(i)) : 0.0;
  // c = P^T L D L^T P, so x = P^T L sqrt(D) z has covariance c.
  const Eigen::MatrixXd l = ldlt.transpositionsP().transpose() * Eigen::MatrixXd(ldlt.matrixL()) * d.asDiagonal();
  std::mt19937_64 engine(seed);
  auto uniform_open = [&] { return (double(engine() >> 11) + 0.5) * 0x1.0p-53; };  // (0, 1), never 0
  std::vector<std::vector<double>> out;
  for (int k = 0; k < count; ++k) {
    Eigen::VectorXd z{Eigen::Index(n)};
    for (Eigen::Index i = 0; i < z.size(); i += 2) {
      const double r = std::sqrt(-2 * std::log(uniform_open())), phi = 2 * pi * uniform_open();
      z(i) = r * std::cos(phi);
      if (i + 1 < z.size()) z(i + 1) = r * std::sin(phi);
    }
    const Eigen::VectorXd x = l * z;
    std::vector<double> sample(mean);
    for (std::size_t i = 0; i < n; ++i) sample[i] += x(Eigen::Index(i));
    out.push_back(std::move(sample));
  }
  return out;
}

ShortestDurationResult design_shortest_duration(const Protocol& protocol, const DesignEvaluator& evaluate,
                                                const DesignOptions& options, double target, double shortest,
                                                int bisections, const DesignHooks& hooks) {
  const double longest = protocol.duration();
  if (!std::isfinite(target)) throw InputError("target", exact(target), "a finite objective value to meet");
  if (!(shortest > 0 && shortest < longest))
    throw InputError("shortest", exact(shortest), "a duration > 0 and below the protocol's duration " + exact(longest));
  if (bisections < 0 || bisections > 30) throw InputError("bisections", std::to_string(bisections), "0 to 30 bisection steps");
  const DesignFamily reference(protocol, options.modes, options.zero_end_acceleration);
  for (const auto& s : protocol.schedules()) {
    const bool designed = std::any_of(reference.parameters().begin(), reference.parameters().end(),
                                      [&](const DesignedParameter& d) { return d.address == s.address(); });
    if (!designed && s.form() != ScheduleForm::constant)
      throw InputError("protocol.change", s.address(),
                       "designed or constant schedules only: the search over the duration rescales the protocol");
  }
  ShortestDurationResult out;
  std::vector<double> warm;  // amplitudes of the shortest duration met so far
  auto trial = [&](double tau) {
    DurationTrial t;
    t.duration = tau;
    bool too_fast = false;
    for (const auto& b : options.bounds)
      for (const auto& d : reference.parameters())
        if (b.address == d.address && std::abs(d.to - d.from) / tau > b.max_speed) too_fast = true;
    if (!too_fast) {
      const DesignFamily family(Protocol(tau, protocol.schedules()), options.modes, options.zero_end_acceleration);
      DesignOptions o = options;
      o.stop_below = target;
      if (!warm.empty()) o.first_start = warm;
      t.ran = true;
      try {
        t.design = design_protocol(family, evaluate, o, hooks);
        t.met = t.design.objective_after <= target;
      } catch (const NoFeasibleDesign& e) {  // not met at this duration; the search goes on
        t.feasible = false;
        t.note = e.what();
        t.design = e.partial;
      }
      if (t.met) warm = t.design.amplitudes;
    }
    out.trials.push_back(std::move(t));
    if (out.trials.back().met) out.best = int(out.trials.size()) - 1;
    return out.trials.back().met;
  };
  const auto time = [&](double t) { return options.message_units(t, Dimension::time()); };
  // Durations without a member inside the bounds: not met, listed in one warning at the end.
  const auto infeasible_warning = [&] {
    std::string list;
    for (const auto& t : out.trials)
      if (!t.feasible) list += (list.empty() ? "" : ", ") + time(t.duration);
    if (!list.empty())
      out.warnings.push_back("no member of the family met the bounds on speed and overshoot at " + list +
                             " (counted as not met; the search went on): loosen the bounds or allow more evaluations");
  };
  if (!trial(longest)) {
    const DurationTrial& t = out.trials.back();
    const std::string why = !t.ran        ? "its mean speed breaks a speed bound"
                            : !t.feasible ? "no member met the bounds on speed and overshoot"
                                          : "objective " + objective_text(t.design.objective_after, options);
    out.warnings.push_back("the target " + objective_text(target, options) + " is not met at the protocol's duration " +
                           time(longest) + " (" + why + "): lengthen the duration, or allow more modes or evaluations");
    out.lower = out.upper = longest;
    return out;
  }
  double lo = shortest, hi = longest;
  if (trial(shortest)) {
    out.warnings.push_back("the target is met already at the shortest duration tried (" + time(shortest) +
                           "): a shorter one may meet it too");
    out.lower = out.upper = shortest;
    return out;
  }
  for (int i = 0; i < bisections; ++i) {
    const double mid = 0.5 * (lo + hi);
    (trial(mid) ? hi : lo) = mid;
  }
  out.lower = lo;
  out.upper = hi;
  infeasible_warning();
  return out;
}

}  // namespace trapwork
