#pragma once
// Protocol design: a family of schedules for the changed parameters of a protocol, and a
// search (NLopt, derivative-free) for the member that leaves the particle least excited.
//
// The family. Each schedule of the protocol whose end values differ (a "designed" parameter,
// from a to b over [0, tau], u = t / tau) becomes
//   lambda(u) = a + (b - a) [ s(u) + sum_{k=1..K} c_k sin^2(pi u) sin(k pi u) ]
// with s the smooth step 3u^2 - 2u^3 (zero end velocity), or the smoother step
// 10u^3 - 15u^4 + 6u^5 (zero end velocity and acceleration). Why these modes:
// sin^2(pi u) sin(k pi u) has zero value, first and second derivative at u = 0 and 1 (the
// product of a double zero of sin^2 and a simple zero of sin), so every member keeps the
// protocol's end values with zero end velocity, and zero end acceleration where s has it; the
// modes are smooth, bounded by 1, and for k = 1..K linearly independent (a sine series times a
// fixed positive weight inside (0, 1)). The amplitudes c_k are in units of the change b - a, so
// one bound |c_k| <= amplitude_bound serves every parameter. Schedules held constant, or whose
// end values are equal, are kept as they are.
//
// Bounds: a member is feasible when lambda stays inside [min(a, b) - o, max(a, b) + o] with
// o = min(overshoot |b - a|, max_overshoot of its DesignBound) and |d lambda/dt| stays at or
// below the bound's max_speed, both checked at 513 points of u (lab-unit bounds are converted
// to internal units by the caller). An infeasible member is not simulated; its objective is the
// penalty 1 + excess above the largest objective found so far (at least 1), so the search is
// pushed back inside and never picks it. The excess is the largest of: the overshoot beyond
// the band in units of |b - a|, and (speed / max_speed - 1). Why a penalty and not NLopt's
// constraints: of the local derivative-free methods only COBYLA takes nonlinear inequality
// constraints (BOBYQA, Nelder-Mead and Sbplx take bounds only; NLopt manual, "NLopt
// Algorithms", from memory), and a penalty serves every method alike; a member that breaks a
// bound costs no work run. The smooth ramp (c = 0) is simulated even when it breaks a bound
// (objective_before), but only feasible members are returned.
//
// Objectives (each from one work run of the protocol built from the member):
//   excitation       1 - sum_m p_m P(m -> m): the probability of leaving the initial level's
//                    adiabatic partner (the level of H_B with the same index; no crossings),
//                    averaged over the initial state (for a level start, 1 - P(m -> m))
//   dissipated_work  <W> - Delta F (a Gibbs initial state only), in internal energy units
//   quanta           mean excitation in quanta: sum_m p_m sum_n P(m -> n) (n - m), the mean
//                    number of levels climbed above the adiabatic partner (level index n of H_B).
//                    In a harmonic trap it is the mean phonon number gained: |alpha|^2 for a
//                    transport from the ground state (coherent state, common practice), (Q* - 1)/2
//                    for a frequency change from it (Husimi 1953, from memory). Probability not
//                    captured by the N final levels kept counts as ending at level N, so with an
//                    unresolved weight the value is a lower bound (the final run reports it).
//
// Search: NLopt's local derivative-free methods (LN_BOBYQA by default, LN_COBYLA,
// LN_NELDERMEAD, LN_SBPLX) from several starts: the first at c = 0 (the smooth ramp), the
// others at points drawn uniformly in half the amplitude box (std::mt19937_64 from `seed`, so a
// run is repeatable). The evaluation bound counts every work run of all starts together: an
// evaluation costs runs_per_evaluation runs (a robust design runs each member of the uncertain
// trap: one run per member), and a member refused by the bounds, not simulated, is charged the
// same, so the bound also bounds the search's length; each start gets an equal share of what is
// left, and the search stops before an evaluation that would pass the bound. A start stops early when the objective falls
// below stop_below. No I/O, no clock: progress and interruption go through hooks.
#include <cstdint>
#include <functional>
#include <limits>
#include <string>
#include <vector>

#include "potentials/potential.hpp"
#include "potentials/protocol.hpp"
#include "solver/moving_wall.hpp"
#include "solver/sharing.hpp"
#include "solver/work.hpp"

namespace trapwork {

enum class DesignObjective { excitation, dissipated_work, quanta };
enum class DesignMethod { bobyqa, cobyla, nelder_mead, sbplx };

// Throw InputError (key "objective" / "method") naming the choices on an unknown name.
DesignObjective design_objective_from_name(const std::string& name);
std::string design_objective_name(DesignObjective objective);
DesignMethod design_method_from_name(const std::string& name);
std::string design_method_name(DesignMethod method);

// Lab-unit bounds on one designed parameter (internal units; infinity: none).
struct DesignBound {
  std::string address;
  double max_speed = std::numeric_limits<double>::infinity();      // |d lambda/dt|, > 0
  double max_overshoot = std::numeric_limits<double>::infinity();  // beyond [min(a,b), max(a,b)], >= 0
};

struct DesignOptions {
  int modes = 3;                        // K free modes per designed parameter (1..20)
  bool zero_end_acceleration = false;   // smoother step as the base ramp
  double amplitude_bound = 1;           // |c_k| <= amplitude_bound (units of b - a), > 0
  double overshoot = 0.5;               // o >= 0, see above
  std::vector<DesignBound> bounds;      // per designed parameter (addresses of the family)
  int starts = 3;                       // >= 1
  int max_evaluations = 200;            // work runs in all, >= starts * runs_per_evaluation
  int runs_per_evaluation = 1;          // work runs of one evaluation (members of a robust design), >= 1
  double stop_below = 0;                // a start ends once the objective is below this
  DesignObjective objective = DesignObjective::excitation;
  DesignMethod method = DesignMethod::bobyqa;
  std::uint64_t seed = 1;
  // Where the first start begins (empty: c = 0, the smooth ramp); e.g. a design made in the
  // harmonic approximation. The smooth ramp is evaluated first in any case (objective_before).
  std::vector<double> first_start;
  // How warnings write durations and (for dissipated_work) objectives; the scenario fills it
  // (SpectrumRequest::message_units). Without units: T0, E0.
  MessageUnits message_units;
};

// One designed parameter of the family.
struct DesignedParameter {
  std::string address;
  double from = 0, to = 0;  // end values (internal units)
};

class DesignFamily {
 public:
  // The designed parameters of `protocol` (schedules with different end values); the others
  // are kept. Throws InputError (key "protocol") when tau <= 0 or nothing changes.
  DesignFamily(const Protocol& protocol, int modes, bool zero_end_acceleration);
  const std::vector<DesignedParameter>& parameters() const { return parameters_; }
  int modes() const { return modes_; }
  int dimension() const { return modes_ * int(parameters_.size()); }
  double duration() const { return protocol_.duration(); }
  // Member with amplitudes c (parameter-major: c[p * modes + k - 1]); designed schedules are
  // formula schedules of t and tau (exact values; derivatives as for any formula schedule).
  Protocol protocol(const std::vector<double>& c) const;
  // The unit-free shape s(u) + sum_k c_k sin^2(pi u) sin(k pi u) of parameter p as a muParser
  // expression of (t/tau) (17 digits): lambda_p = from + (to - from) * shape in any units, so
  // the scenario layer writes it with lab-unit end values (a wall's formula ramp).
  std::string shape_expression(std::size_t p, const std::vector<double>& c) const;
  // lambda_p(u) of parameter p at 0 <= u <= 1 for amplitudes c.
  double value(std::size_t p, const std::vector<double>& c, double u) const;
  // d lambda_p/dt (internal units) at 0 <= u <= 1 for amplitudes c.
  double rate(std::size_t p, const std::vector<double>& c, double u) const;
  // Largest excess of the member over the overshoot band, in units of |b - a| (0: feasible).
  double overshoot_excess(const std::vector<double>& c, double overshoot) const;
  // Largest excess over the relative overshoot and the lab-unit bounds (see above; 0: feasible).
  double bound_excess(const std::vector<double>& c, double overshoot, const std::vector<DesignBound>& bounds) const;
  // Largest |d lambda_p/dt| and largest excursion beyond [min(a,b), max(a,b)] (internal units),
  // at 513 points of u.
  double max_speed(std::size_t p, const std::vector<double>& c) const;
  double max_overshoot(std::size_t p, const std::vector<double>& c) const;
  // The base ramp's name ("smooth step 3u^2 - 2u^3" or the smoother one) and the mode formula.
  std::string description() const;

 private:
  Protocol protocol_;
  std::vector<DesignedParameter> parameters_;
  int modes_ = 0;
  bool smoother_ = false;
};

// One work run of the search.
struct DesignEvaluation {
  int index = 0;        // 0, 1, ... in the order run
  int start = 0;        // which start it belongs to
  std::vector<double> amplitudes;
  double objective = 0;     // the penalty when infeasible
  bool feasible = true;
  double excess = 0;        // overshoot excess (units of |b - a|) when infeasible
};

struct DesignResult {
  std::vector<DesignedParameter> parameters;
  int modes = 0;
  std::vector<double> amplitudes;       // best feasible member
  double objective_before = 0;          // smooth ramp (c = 0)
  bool before_feasible = true;          // the smooth ramp meets the bounds
  double objective_after = 0;           // best member
  std::vector<DesignEvaluation> history;
  int work_runs = 0;                    // charged to the bound: history.size() * runs_per_evaluation
  std::vector<std::string> start_results;  // NLopt's ending of each start ("reached stop_below")
  bool bound_reached = false;           // the evaluation bound ended the search
  std::vector<std::string> warnings;    // with the value: bound reached, no improvement, ...
};

// The objective of one member: a work run of its protocol.
using DesignEvaluator = std::function<double(const Protocol&)>;

// The objective from a finished work run. Throws PhysicsError for dissipated_work without a
// Gibbs initial state (no Delta F), or when the final levels do not include a kept initial level.
double design_objective(const WorkResult& result, DesignObjective objective);

// run_work of `base` with the member's protocol, with only what the objective needs: no
// reverse run, time-step check, grid check or traces (the design's final run is for the caller
// to check as any work run).
DesignEvaluator work_evaluator(Potential base, WorkRequest request, DesignObjective objective);

// Moving walls: run_wall_work (solver/moving_wall.hpp) of the member, with only what the
// objective needs (as work_evaluator). The member's schedules addressed "<name>.left" and
// "<name>.right" (name of `walls`) move the walls, a wall without one keeps the schedule of
// `walls`, and every other schedule is the inner potential's. Design the walls in the family of
// walls.as_protocol(): its members are formula schedules, whose acceleration (5-point
// differences) the dilated frame needs; a table ramp has none and WallProtocol refuses it.
DesignEvaluator wall_evaluator(WallProtocol walls, WallWorkRequest request, DesignObjective objective);

struct DesignHooks {
  // After each evaluation: it, the evaluations done and the bound.
  std::function<void(const DesignEvaluation&, int done, int bound)> progress;
  // Before each evaluation; may throw (Interrupted) to stop the search, which it lets through.
  std::function<void()> interrupt;
};

// Robust design over an uncertain trap: the mean of the members' objectives, equally weighted
// (each evaluation costs one work run per member), summed in the members' order. Members'
// exceptions pass through. With `sharing` (solver/sharing.hpp) member i is run by its owner
// process only and the objectives are exchanged at each evaluation: every process runs the
// same search and gets the same mean, bit for bit.
DesignEvaluator averaged_evaluator(std::vector<DesignEvaluator> members, PartSharing sharing = {});

// `count` samples of a multivariate normal N(mean, covariance): mean + L z with L the Cholesky
// factor of the covariance (Eigen's LDLT, so a semi-definite covariance from a fit with an exact
// correlation works; pivots within 1e-12 of the largest diagonal, which rounding leaves, are taken as 0) and z standard
// normal by Box-Muller (common practice) from std::mt19937_64(seed), written out so the samples do
// not depend on the standard library. InputError (key "covariance") when not square, not
// symmetric to 1e-12 relative, or with a pivot below -1e-12 of the largest diagonal.
std::vector<std::vector<double>> gaussian_samples(const std::vector<double>& mean,
                                                  const std::vector<std::vector<double>>& covariance, int count,
                                                  std::uint64_t seed);

// No member evaluated met the bounds on speed and overshoot: the message says the least excess
// and what to change; `partial` holds the search's history (amplitudes and objective empty).
struct NoFeasibleDesign : PhysicsError {
  DesignResult partial;
  NoFeasibleDesign(const std::string& what, DesignResult partial_) : PhysicsError(what), partial(std::move(partial_)) {}
};

// Searches the family for the least objective. InputError for options out of range;
// NoFeasibleDesign when no member evaluated meets the bounds;
// the evaluator's exceptions pass through (a member that cannot be computed stops the search).
DesignResult design_protocol(const DesignFamily& family, const DesignEvaluator& evaluate,
                             const DesignOptions& options, const DesignHooks& hooks = {});

// The shortest duration whose design meets a target (objective <= target): an outer search over
// tau with a design at each duration (the protocol's schedules other than the designed ones must
// be constant, since tau rescales the family; InputError otherwise). First a design at the
// protocol's duration (the longest; when it misses the target the search ends there with a
// warning), then at `shortest` (when that meets it, it is the answer, with a warning that a
// shorter one may too), then `bisections` bisection steps of the bracket, each design starting
// from the amplitudes of the shortest duration met so far, with stop_below = target. A duration
// whose mean speed |b - a| / tau breaks a speed bound is not met (no design run); a duration
// whose search finds no member within the bounds (NoFeasibleDesign) is not met either, and the
// search goes on (a warning lists those durations). Cost bound:
// (bisections + 2) designs of options.max_evaluations work runs each. A local search may miss a
// target it could meet, so "met" is monotone only in practice: the trials are all reported.
struct DurationTrial {
  double duration = 0;
  bool met = false;
  bool ran = false;       // false: refused by the mean speed (no design)
  bool feasible = true;   // false: the search ran but no member met the bounds (not met)
  std::string note;       // why not feasible (the search's message)
  DesignResult design;    // when ran (when not feasible: the history only)
};
struct ShortestDurationResult {
  std::vector<DurationTrial> trials;  // in the order run
  int best = -1;                      // index of the shortest trial that met the target (-1: none)
  double lower = 0, upper = 0;        // the last bracket: not met at lower, met at upper
  std::vector<std::string> warnings;
};
ShortestDurationResult design_shortest_duration(const Protocol& protocol, const DesignEvaluator& evaluate,
                                                const DesignOptions& options, double target, double shortest,
                                                int bisections, const DesignHooks& hooks = {});

}  // namespace trapwork
