#pragma once
// Protocols: parameter schedules lambda(t) over 0 <= t <= tau applied to a Potential.
//
// All times and values are internal units (solver/units.hpp). A protocol has a duration tau
// (tau = 0 is a sudden switch: only the initial and final potentials are defined) and any
// number of schedules, each for one parameter address of the potential ("trap.centre",
// "trap.frequency", "tweezer.depth"). Schedule forms, with u = t / tau:
//   constant       lambda = a
//   linear         lambda = a + (b - a) u
//   smooth_step    lambda = a + (b - a) (3u^2 - 2u^3)              zero end velocity
//   smoother_step  lambda = a + (b - a) (10u^3 - 15u^4 + 6u^5)     zero end velocity and acceleration
//   table          piecewise-linear through (t_i, lambda_i), t_i strictly increasing, covering
//                  [0, tau]; derivative = segment slope, second derivative 0 (delta functions
//                  at the kinks are not represented)
//   formula        lambda = f(t), a muParser expression in t (internal time) and tau; derivatives
//                  by 5-point central differences, error O(h^4) with h = 1e-3 tau (1e-3 for tau = 0)
//                  (common practice), about 1e-10 relative for smooth f
// Each schedule gives value, first and second time derivative (needed by the co-moving frame).
// Slightly outside [0, tau] every form continues its own formula (ramps their polynomial,
// tables their end segments), because the fourth-order composition of Strang steps evaluates
// V at times up to 0.35 dt beyond the ends and needs a smooth V(t) there.
// The reversed protocol is lambda_R(t) = lambda(tau - t) (derivative sign flipped).
// Formula terms of the potential that use t (explicit time dependence) follow the same
// clock: at(base, t) reads them at t (reversed: tau - t), so H_A = V(x, 0) and H_B = V(x, tau).
// A sudden switch (tau = 0) compares V at t = 0 before and after, so a formula using t would
// have no effect there: check() refuses it (InputError naming the term's expression).
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "potentials/potential.hpp"

namespace trapwork {

enum class ScheduleForm { constant, linear, smooth_step, smoother_step, table, formula };

struct ScheduleValue {
  double value = 0;
  double rate = 0;          // d lambda / dt
  double acceleration = 0;  // d^2 lambda / dt^2
};

class Schedule {
 public:
  static Schedule constant(std::string address, double value);
  static Schedule linear(std::string address, double from, double to);
  static Schedule smooth_step(std::string address, double from, double to);
  static Schedule smoother_step(std::string address, double from, double to);
  // Throws InputError (key = address) unless times strictly increase, sizes match, >= 2 rows,
  // all finite.
  static Schedule table(std::string address, std::vector<double> times, std::vector<double> values);
  // Throws InputError (key = address) on a syntax error or a variable other than t and tau.
  static Schedule formula(std::string address, std::string expression);

  Schedule(const Schedule&);
  Schedule& operator=(const Schedule&);
  Schedule(Schedule&&) noexcept;
  Schedule& operator=(Schedule&&) noexcept;
  ~Schedule();

  const std::string& address() const { return address_; }
  ScheduleForm form() const { return form_; }
  bool is_reversed() const { return reversed_; }
  // lambda, lambda', lambda'' at 0 <= t <= tau. For tau = 0 the rates are 0 (undefined).
  // Not safe to call concurrently on one object (formula schedules reuse a parser).
  ScheduleValue evaluate(double t, double tau) const;
  double initial_value(double tau) const;  // lambda at t = 0 (u = 0)
  double final_value(double tau) const;    // lambda at t = tau (u = 1)
  Schedule reversed() const;
  // Throws InputError (key = address) if a table does not cover [0, tau].
  void check(double tau) const;

 private:
  struct Formula;
  Schedule(std::string address, ScheduleForm form);
  ScheduleValue evaluate_forward(double t, double tau, bool at_end) const;
  std::string address_;
  ScheduleForm form_;
  double from_ = 0, to_ = 0;
  std::vector<double> times_, values_;
  std::unique_ptr<Formula> formula_;
  bool reversed_ = false;
};

// A pure translation V(x, t) = V_0(x - d(t)) with d(0) = 0, as recognised by
// Protocol::translation: the displacement and its derivatives.
struct Translation {
  std::vector<std::string> addresses;  // the centre schedules that move together
};

class Protocol {
 public:
  // Throws InputError for tau < 0 or not finite, a repeated address, or a table that does
  // not cover [0, tau]. time_reversed: formula terms using t are read at tau - t (the
  // schedules given are already reversed; reversed() sets it).
  Protocol(double tau, std::vector<Schedule> schedules, bool time_reversed = false);
  bool is_time_reversed() const { return time_reversed_; }
  double duration() const { return tau_; }
  const std::vector<Schedule>& schedules() const { return schedules_; }

  // The base potential with every scheduled parameter set to its value at t, and its
  // formula time (Potential::time) t, or tau - t when reversed. Throws InputError for an
  // address the potential does not have.
  Potential at(const Potential& base, double t) const;
  Potential initial(const Potential& base) const;  // t = 0
  Potential final(const Potential& base) const;    // t = tau
  // Throws InputError naming the first address the potential does not have, or the
  // expression of a formula term using t when tau = 0.
  void check(const Potential& base) const;
  Protocol reversed() const;

  // Recognises a rigid translation: every schedule is a "<term>.centre", every term of base
  // is scheduled, no term is a formula (which could depend on t itself), and all centres move
  // by the same displacement (checked at 257 times to 1e-12 relative). Then returns the
  // displacement schedules; otherwise nothing.
  std::optional<Translation> translation(const Potential& base) const;
  // Displacement d(t) = lambda(t) - lambda(0) of a recognised translation, with derivatives.
  ScheduleValue displacement(const Translation& translation, double t) const;
  // The co-moving frame needs the displacement's acceleration (the inertial force -m d''(t) x);
  // a table schedule has none between its rows (its kinks are delta functions). Empty when the
  // frame can be used; otherwise the reason, naming the schedule.
  std::string co_moving_obstacle(const Translation& translation) const;

 private:
  const Schedule& find(const std::string& address) const;
  double formula_time(double t) const { return time_reversed_ ? tau_ - t : t; }
  double tau_;
  std::vector<Schedule> schedules_;
  bool time_reversed_ = false;
};

}  // namespace trapwork
