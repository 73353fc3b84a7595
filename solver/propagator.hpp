#pragma once
// Time evolution i d psi/dt = H(t) psi, H(t) = p^2/2 + V(x, t) (hbar = m = 1, internal units),
// for a batch of wavefunctions at once.
//
// The Propagator concept (modelled on ODE-library stepper concepts):
//
//   expression             meaning
//   P::State               the batch of states the propagator advances (one column per state)
//   p.step(state, t, dt)   advances state from t to t + dt in place (dt may be negative:
//                          a step backwards in time); valid for t, t + dt inside [0, tau]
//   p.order()              global order in dt of the error of one step's scheme
//
// A MultiStepPropagator also offers
//   p.steps(state, t_begin, t_end, total, first, count)
//                          advances state through steps first .. first + count - 1 of the
//                          uniform subdivision of [t_begin, t_end] into `total` steps (times
//                          subdivision_time), as many step() calls would, up to rounding; a
//                          PhysicsError it throws is a StepError naming the failing step.
//
// Models: SplitOperatorPropagator (grid, order 2 or 4; multi-step) and EigenbasisPropagator
// (truncated eigenbasis ODE, Boost.Odeint Dormand-Prince 5(4) with error control, reported
// order 5). Swapping one for the other is the cross-check. propagate() owns the loop and the
// observer.
#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <complex>
#include <concepts>
#include <functional>
#include <limits>
#include <memory>
#include <mutex>
#include <optional>
#include <string>
#include <type_traits>
#include <utility>
#include <vector>

#include "potentials/protocol.hpp"
#include "solver/errors.hpp"
#include "solver/grid.hpp"
#include "solver/hamiltonian.hpp"
#include "solver/spectrum.hpp"

namespace trapwork {

template <class P>
concept Propagator = requires(P& p, const P& cp, typename P::State& state, double t, double dt) {
  typename P::State;
  { p.step(state, t, dt) } -> std::same_as<void>;
  { cp.order() } -> std::convertible_to<int>;
};

template <class P>
concept MultiStepPropagator =
    Propagator<P> && requires(P& p, typename P::State& state, double t, int i) {
      { p.steps(state, t, t, i, i, i) } -> std::same_as<void>;
    };

// Time i of the uniform subdivision of [t_begin, t_end] into `steps` steps:
// t_begin + i (t_end - t_begin)/steps, computed from i (not accumulated), exactly t_end for
// i = steps.
inline double subdivision_time(double t_begin, double t_end, int steps, int i) {
  return i == steps ? t_end : t_begin + i * ((t_end - t_begin) / steps);
}

// A PhysicsError of step `step()` (0-based index in the subdivision) of a multi-step call;
// what() is the cause's message.
class StepError : public PhysicsError {
 public:
  StepError(int step, const std::string& what) : PhysicsError(what), step_(step) {}
  int step() const { return step_; }

 private:
  int step_;
};

// An observer is any callable taking (const State&, double t), returning void or bool;
// returning false stops the propagation. The default does nothing.
struct NoObserver {
  template <class State>
  void operator()(const State&, double) const {}
};

// An observer called only every `interval` steps (at t_begin, after every interval-th step
// and after the last step), so that propagate() can hand the steps in between to a
// multi-step propagator at once. Made by observe_every().
template <class Observer>
struct ObserveEvery {
  int interval;
  Observer observer;
};
template <class Observer>
ObserveEvery<std::decay_t<Observer>> observe_every(int interval, Observer&& observer) {
  return {interval, std::forward<Observer>(observer)};
}

// A potential sample that is NaN or infinite, with where and when (internal units) so that a
// caller can say them in lab units: describe(units) is "potential at x = 1.2 um is NaN at
// t = 2.97 ms: ..."; what() is describe({}) (internal units named L0 and T0).
struct NonFinitePotentialError : PhysicsError {
  std::string coordinate;  // "x", "y = x - d(t) (co-moving frame)", "y = (x - a)/L (dilated box)"
  Dimension coordinate_dimension;  // length, or none for the dilated box's y
  double position = 0, time = 0;
  bool is_nan = true;
  int step = 0, steps = 0;  // set by propagate(): the step (1-based) that failed, of `steps`
  double step_time = 0;     // ... and the time at its end
  NonFinitePotentialError(std::string coordinate_, Dimension dimension, double position_, double time_, bool nan);
  std::string describe(const MessageUnits& units) const;
  void set_step(int step_, int steps_, double step_time_);  // also updates what()
};

// Throws NonFinitePotentialError naming the first sample that is NaN or infinite.
// points[j] is the coordinate of v[j]; a coordinate other than "x" or "y = x - ..." is taken
// as dimensionless.
void check_potential_finite(const std::vector<double>& v, const std::vector<double>& points, double t,
                            const std::string& coordinate = "x");

// Shortest round-trip text of a number, for error messages.
std::string format_number(double value);

// Index of the first column of `state` holding a NaN or an infinity, or -1 when all are finite.
int first_nonfinite_column(const Eigen::MatrixXcd& state);

// Steps between two checks of the state for NaN or infinity in propagate(): a check reads the
// batch once, a step at least twice and transforms it, so checking every 64th step costs well
// under 1% of the loop.
inline constexpr int finite_check_interval = 64;

namespace detail {
template <class T>
struct is_observe_every : std::false_type {};
template <class O>
struct is_observe_every<ObserveEvery<O>> : std::true_type {};
}  // namespace detail

// Calls observer(state, t) at t = subdivision_time(t_begin, t_end, steps, i) for
// i = 0 .. steps (the last time is exactly t_end; an ObserveEvery observer only at i = 0, the
// multiples of its interval and i = steps), and steps in between. Returns the number of steps
// taken (fewer than `steps` when the observer returned false). steps must be >= 1.
// A multi-step propagator with NoObserver or an ObserveEvery observer is advanced by steps()
// from one observation or finite check to the next; otherwise by step() one step at a time.
// Guards: a PhysicsError thrown by a step (for example a NaN or infinite potential sample) is
// rethrown with the step index and time in front (the state is then left at an earlier step).
// For matrix states the state is checked for NaN or infinity at the start, every
// finite_check_interval steps and after the last step; a bad column throws PhysicsError naming
// the column, the step and the time where it was found and the last step where the whole state
// was still finite.
template <Propagator P, class Observer = NoObserver>
int propagate(P& propagator, typename P::State& state, double t_begin, double t_end, int steps,
              Observer&& observer = {}) {
  TRAPWORK_EXPECT(steps >= 1, "propagate needs steps >= 1");
  using State = typename P::State;
  using O = std::remove_cvref_t<Observer>;
  constexpr bool silent = std::is_same_v<O, NoObserver>, sparse = detail::is_observe_every<O>::value;
  constexpr bool batched = MultiStepPropagator<P> && (silent || sparse);
  int interval = 1;  // steps between observations
  if constexpr (silent) interval = steps;
  if constexpr (sparse) interval = std::max(1, observer.interval);
  auto notify = [&](double t) -> bool {
    if constexpr (silent) {
      return true;
    } else {
      auto& call = [&]() -> auto& {
        if constexpr (sparse) return observer.observer;
        else return observer;
      }();
      if constexpr (std::is_same_v<std::invoke_result_t<decltype(call), const State&, double>, void>) {
        call(std::as_const(state), t);
        return true;
      } else {
        return static_cast<bool>(call(std::as_const(state), t));
      }
    }
  };
  auto time = [&](int i) { return subdivision_time(t_begin, t_end, steps, i); };
  auto where = [&](int step) {
    return "propagation step " + std::to_string(step) + " of " + std::to_string(steps) + " (t = " +
           format_number(time(step)) + ")";
  };
  int last_finite = 0;  // steps taken when the state was last found finite
  auto check_finite = [&](int taken) {
    if constexpr (std::is_convertible_v<const State&, const Eigen::MatrixXcd&>) {
      const int column = first_nonfinite_column(state);
      if (column < 0) {
        last_finite = taken;
      } else if (taken == 0) {
        throw PhysicsError("propagation: the initial state column " + std::to_string(column) +
                           " holds NaN or infinity at t = " + format_number(time(0)));
      } else {
        throw PhysicsError(where(taken) + ": state column " + std::to_string(column) + " (initial state " +
                           std::to_string(column) + " of the batch) holds NaN or infinity (finite at step " +
                           std::to_string(last_finite) + "): the time step may be too long for the potential, " +
                           "or the potential is singular");
      }
    }
  };
  check_finite(0);
  if (!notify(t_begin)) return 0;
  for (int i = 0; i < steps;) {
    int next = i + 1;  // the next check, observation or the end
    if constexpr (batched)
      next = std::min({steps, (i / finite_check_interval + 1) * finite_check_interval, (i / interval + 1) * interval});
    try {
      if constexpr (batched)
        propagator.steps(state, t_begin, t_end, steps, i, next - i);
      else
        propagator.step(state, time(i), time(next) - time(i));
    } catch (NonFinitePotentialError& e) {
      if (e.step == 0) e.set_step(next, steps, time(next));  // keeps the values for lab units
      throw;
    } catch (const PhysicsError& e) {
      const auto* failed = dynamic_cast<const StepError*>(&e);
      throw PhysicsError(where(failed ? failed->step() + 1 : next) + ": " + e.what());
    }
    i = next;
    if (i % finite_check_interval == 0 || i == steps) check_finite(i);
    if ((i % interval == 0 || i == steps) && !notify(time(i))) return i;
  }
  return steps;
}

// The potential the propagator sees on its grid, in the lab frame or in the co-moving frame
// of a rigid translation V(x, t) = V_0(x - d(t)):
//   psi(x, t) = exp(i [d'(t) x + theta(t)]) phi(x - d(t), t),
//   theta(t) = -int_0^t (d'' d + d'^2/2) dt',
//   i d phi/dt = [p^2/2 + V_0(y) + d''(t) y] phi.
// (Derived by substitution; the inertial force is -d'' (m = 1), its potential +d'' y; common
// practice.) The frame grid holds y = x - d(t), so the grid need not cover the path.
// to_lab multiplies by exp(i [d'(t) y + d'(t) d(t) + theta(t)]): the lab wavefunction sampled at
// x_j = y_j + d(t). Its global phase d' d + theta = (1/2) int_0^t d'^2 dt' is integrated by
// composite Simpson (4096 intervals).
class PotentialPath {
 public:
  static PotentialPath lab(Grid grid, Potential base, Protocol protocol);
  // Throws PhysicsError unless protocol.translation(base) recognises a rigid translation.
  static PotentialPath co_moving(Grid grid, Potential base, Protocol protocol);

  const Grid& grid() const { return grid_; }
  const Protocol& protocol() const { return protocol_; }
  bool is_co_moving() const { return translation_.has_value(); }
  // v[j] = V(x_j, t) in the frame (resized to the grid size). Throws PhysicsError naming the
  // point and time when a sample is NaN or infinite (check_potential_finite).
  void sample(double t, std::vector<double>& v) const;
  std::vector<double> sample(double t) const;
  // Frame wavefunctions (columns) <-> lab wavefunctions at time t; identity in the lab frame.
  void to_lab(Eigen::MatrixXcd& states, double t) const;
  void from_lab(Eigen::MatrixXcd& states, double t) const;
  // Displacement d(t) of the frame (0 in the lab frame).
  double displacement(double t) const;
  // An added potential term (noise during the protocol, solver/noise.hpp): sample() calls
  // perturbation(t, x, v) with the lab positions x_j = (frame point j) + d(t) after filling v,
  // and the term adds its values to v. Copied with the path; a path copy used on another
  // thread needs a perturbation safe to call there.
  using Perturbation = std::function<void(double t, const std::vector<double>& lab_points, std::vector<double>& v)>;
  PotentialPath with_perturbation(Perturbation perturbation) const;

 private:
  PotentialPath(Grid grid, Potential base, Protocol protocol, std::optional<Translation> translation);
  void frame_phase(Eigen::MatrixXcd& states, double t, double sign) const;
  Grid grid_;
  Potential base_;      // lab: the base potential; co-moving: V_0 = protocol.initial(base)
  Protocol protocol_;
  std::optional<Translation> translation_;
  std::vector<double> points_;
  Perturbation perturbation_;
};

enum class SplitOrder { strang = 2, fourth = 4 };

// FFTW planning: `measure` times candidate algorithms first (FFTW_MEASURE: fastest transforms,
// a planning cost of some hundred transforms per new shape, repaid by long runs); `estimate`
// takes FFTW's heuristic choice at once (FFTW_ESTIMATE: for short runs). Results agree to
// rounding either way.
enum class FftPlanning { measure, estimate };

// Half kick of a split-operator step: kick[j] = exp(-i v[j] dt/2). Returns the spread of the
// phase over the grid, (max v - min v) |dt| / 2 (radians), a time-step diagnostic.
double potential_kick(const std::vector<double>& v, double dt, std::vector<std::complex<double>>& kick);

// Potential samples at the two most recent times: adjacent split-operator steps share an end
// point, so each time is sampled once. fill(t, values) computes the samples.
class RecentSamples {
 public:
  template <class Fill>
  const std::vector<double>& at(double t, Fill&& fill) {
    for (int k = 0; k < 2; ++k)
      if (time_[k] == t) return values_[k];
    const int k = next_;
    next_ = 1 - next_;
    fill(t, values_[k]);
    time_[k] = t;
    return values_[k];
  }

 private:
  double time_[2] = {std::numeric_limits<double>::quiet_NaN(), std::numeric_limits<double>::quiet_NaN()};
  std::vector<double> values_[2];
  int next_ = 0;
};

// Yoshida's triple jump of a symmetric second-order step (Yoshida, Phys. Lett. A 150, 262
// (1990), from memory): strang(t, g1 dt), strang(t + g1 dt, g0 dt), strang(t + (g1+g0) dt,
// g1 dt) with g1 = 1/(2 - 2^{1/3}), g0 = -2^{1/3}/(2 - 2^{1/3}); symmetric and of order 4. The
// last substep ends exactly at t + dt.
inline double triple_jump_g1() { return 1 / (2 - std::cbrt(2.0)); }
inline double triple_jump_g0() { return -std::cbrt(2.0) / (2 - std::cbrt(2.0)); }
template <class Strang>
void triple_jump(Strang&& strang, double t, double dt) {
  const double g1 = triple_jump_g1(), g0 = triple_jump_g0();
  strang(t, g1 * dt);
  strang(t + g1 * dt, g0 * dt);
  strang(t + (g1 + g0) * dt, t + dt - (t + (g1 + g0) * dt));
}

// The fused split-operator pass over a batch of columns, shared by the grid propagators:
//   psi_c <- after .* B^-1[ kinetic .* B[ before .* psi_c ] ]   for every column c,
// or several such substeps in a row per column (apply_many: temporal blocking),
// B the unnormalised transform of the grid (FFT forward and backward, or DST-I = FFTW RODFT00,
// its own inverse, on the real and imaginary parts for a hard-walled box); `kinetic` carries
// exp(-i T dt) and the transform normalisation. Cache blocking (common practice): columns go
// in blocks of block_columns(), each copied (times `before`) into a worker's own aligned
// scratch, transformed (out of place into a second scratch, for the Fourier grid), multiplied
// and transformed back while in cache, and written back
// (times `after`): one pass over the states per call, however many substeps. Plans (FFTW_MEASURE, one block shape and
// the remainder's, made once on the scratch before any data is written) are executed with
// new-array execution, which FFTW allows from several threads at once.
// The block split depends only on (points, columns), never on the thread count, and a block's
// arithmetic is the same whichever worker runs it, so the result does not depend on the
// number of threads (bit for bit, as long as FFTW measures the same plans; within one process
// it reuses what it measured). Memory: the scratch, 2 x threads x block_columns() x points
// complex samples (about 512 KiB per thread; half that for the sine transform), beside the
// states.
class BatchedSplitStep {
 public:
  // points >= 1, columns >= 1, threads >= 1 (threads - 1 worker threads are started; the
  // calling thread is the first worker). Workers the system refuses to start are left out:
  // threads() is the number running, thread_refusal() the system's reason (empty: none).
  BatchedSplitStep(std::size_t points, int columns, bool sine_transform, int threads,
                   FftPlanning planning = FftPlanning::measure);
  ~BatchedSplitStep();
  BatchedSplitStep(BatchedSplitStep&&) noexcept;
  BatchedSplitStep& operator=(BatchedSplitStep&&) noexcept;
  BatchedSplitStep(const BatchedSplitStep&) = delete;
  BatchedSplitStep& operator=(const BatchedSplitStep&) = delete;

  // state: points x columns; before, kinetic, after: `points` factors each.
  void apply(Eigen::MatrixXcd& state, const std::complex<double>* before, const std::complex<double>* kinetic,
             const std::complex<double>* after);
  // `substeps` >= 1 substeps while each block is in cache: for every column c, for s = 0 ..
  // substeps - 1, psi_c <- B^-1[ kinetic[s] .* B[ kicks[s] .* psi_c ] ], then
  // psi_c <- kicks[substeps] .* psi_c. kicks: substeps + 1 arrays, kinetic: substeps arrays, of
  // `points` factors each. apply() is the case substeps = 1.
  // meanwhile (may be empty) runs on the calling thread while the other workers start on the
  // blocks (with one thread: before them); it must not throw and must not touch `state`.
  void apply_many(Eigen::MatrixXcd& state, int substeps, const std::complex<double>* const* kicks,
                  const std::complex<double>* const* kinetic, const std::function<void()>& meanwhile = {});
  std::size_t points() const;
  int columns() const;
  int threads() const;
  const std::string& thread_refusal() const;
  int block_columns() const;
  // Per column, the largest share of its norm found in the outer 2% of the transform's modes
  // (the Fourier modes nearest +-pi/dx, or the top sine modes), measured after the first forward
  // transform of every apply_many call with several substeps and of every 32nd call with one:
  // where a state's momentum reaches the grid's limit pi hbar/dx its motion aliases (wraps
  // around), which no check of the final states need see. position_edge(): the same for the
  // outer 2% of the grid points (a periodic grid's states wrap around there too; 0 for the sine
  // transform, whose walls are the problem's own). Since construction.
  const std::vector<double>& momentum_edge() const;
  const std::vector<double>& position_edge() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

// The two potential half kicks of a Strang step, exp(-i V(t) dt/2) and exp(-i V(t + dt) dt/2)
// (potential_kick). The second kick of one step is the first of the next when it starts at
// t + dt with the same dt, so consecutive equal steps compute one kick each (the same numbers
// as computing both). sample(time) returns the potential samples at that time.
class StrangKicks {
 public:
  template <class Sample>
  void update(double t, double dt, Sample&& sample) {
    if (after_time_ == t && after_dt_ == dt) {
      std::swap(before_, after_);
      std::swap(before_spread_, after_spread_);
    } else {
      before_spread_ = potential_kick(sample(t), dt, before_);
    }
    after_spread_ = potential_kick(sample(t + dt), dt, after_);
    after_time_ = t + dt;
    after_dt_ = dt;
  }
  const std::complex<double>* before() const { return before_.data(); }
  const std::complex<double>* after() const { return after_.data(); }
  // Largest potential phase spread of the two kicks (radians), as potential_kick returns.
  double spread() const { return std::max(before_spread_, after_spread_); }

 private:
  std::vector<std::complex<double>> before_, after_;
  double before_spread_ = 0, after_spread_ = 0;
  double after_time_ = std::numeric_limits<double>::quiet_NaN(), after_dt_ = 0;
};

// Split-operator Fourier method (Feit, Fleck & Steiger, J. Comput. Phys. 47, 412 (1982),
// from memory) on the grid's own kinetic operator (FFT for a periodic grid, DST-I for a box).
// One Strang step from t to t + dt:
//   S(t, dt) = exp(-i V(t+dt) dt/2) exp(-i T dt) exp(-i V(t) dt/2).
// This is Strang splitting of the autonomous extended system (x, s) with s' = 1, so it is
// second order and time-reversal symmetric: S(t + dt, -dt) = S(t, dt)^{-1}. With real V and T
// the whole product also satisfies U_R = U_F^T for the mirrored protocol, which makes the
// Tasaki-Crooks relation hold line by line at any dt (so it checks the implementation, not
// the accuracy). (A half kick at one time t + dt/2 would also be symmetric; using both ends
// lets adjacent steps share a potential evaluation.)
// Fourth order: the triple jump S(t + (g1+g0) dt, g1 dt) S(t + g1 dt, g0 dt) S(t, g1 dt),
// g1 = 1/(2 - 2^{1/3}), g0 = -2^{1/3}/(2 - 2^{1/3}) (Yoshida, Phys. Lett. A 150, 262 (1990);
// Suzuki 1990; from memory), symmetric and of order 4.
// Construction plans the transforms once (BatchedSplitStep below); step() only computes the
// potential half kicks (reusing the previous step's second kick when consecutive steps share
// t and dt) and runs the fused pass, spread over `threads` worker threads owned by the
// propagator. steps() (temporal blocking) goes through the steps in chunks of up to
// chunk_substeps() Strang substeps: it computes the kicks of a chunk first, merging the second
// half kick of each substep with the first of the next into one kick exp(-i V(t) (h_a + h_b)/2)
// (h_a, h_b the lengths of the substeps that meet at t; exact in exact arithmetic), then runs
// every column block through the whole chunk while it is in cache (BatchedSplitStep::
// apply_many): one pass over the states per chunk, one kick and one kinetic multiplication per
// point and substep. It uses the nominal lengths (dt, or g1 dt and g0 dt) for kicks and kinetic
// phases, so its results agree with step() to rounding, not bit for bit. While the blocks go
// through one chunk, the calling thread computes the next chunk's kicks (then joins the other
// workers), so that sampling the potential does not hold the other threads up. Memory: the
// kicks of two chunks, 2 x (chunk_substeps() + 1) x points complex samples (about 2 MiB).
// Chunks depend only on the sizes and the step range, so results do not depend on `threads`.
// Move-only.
class SplitOperatorPropagator {
 public:
  using State = Eigen::MatrixXcd;  // grid points x columns, samples psi(x_j)
  SplitOperatorPropagator(PotentialPath path, int columns, SplitOrder order = SplitOrder::fourth, int threads = 1,
                          FftPlanning planning = FftPlanning::measure);
  ~SplitOperatorPropagator();
  SplitOperatorPropagator(SplitOperatorPropagator&&) noexcept;
  SplitOperatorPropagator& operator=(SplitOperatorPropagator&&) noexcept;
  SplitOperatorPropagator(const SplitOperatorPropagator&) = delete;
  SplitOperatorPropagator& operator=(const SplitOperatorPropagator&) = delete;

  void step(State& state, double t, double dt);
  // Steps first .. first + count - 1 (count >= 0) of the uniform subdivision of
  // [t_begin, t_end] into `total` steps (the MultiStepPropagator contract). A potential sample
  // that is NaN or infinite throws StepError naming its step; the state is then left at the
  // start of the chunk where it was found.
  void steps(State& state, double t_begin, double t_end, int total, int first, int count);
  int order() const { return static_cast<int>(order_); }
  const PotentialPath& path() const { return path_; }
  int columns() const { return columns_; }
  // Threads running the passes (fewer than asked for when the system refused some; the
  // results do not depend on it) and the system's reason (empty: every thread started).
  int threads() const { return pass_.threads(); }
  const std::string& thread_refusal() const { return pass_.thread_refusal(); }
  // Per column, the largest share of its norm in the outer 2% of the grid's momenta over the
  // steps taken so far (BatchedSplitStep::momentum_edge).
  const std::vector<double>& momentum_edge() const { return pass_.momentum_edge(); }
  const std::vector<double>& position_edge() const { return pass_.position_edge(); }
  // Strang substeps per chunk of steps() (a whole number of steps; depends on the grid size).
  int chunk_substeps() const;
  // Largest potential phase spread (max V - min V) |h|/2 of a kick and T_max |dt| of a step
  // (radians) over the steps of the last step() or steps() call: the phase per step, a
  // time-step diagnostic (large values mean the step does not resolve the fastest phases).
  double max_phase() const { return max_phase_; }

 private:
  void strang(State& state, double t, double dt);
  const std::vector<double>& potential_at(double t);
  const std::vector<std::complex<double>>& kinetic_phase(double dt);
  PotentialPath path_;
  int columns_;
  SplitOrder order_;
  BatchedSplitStep pass_;
  std::vector<double> kinetic_;  // T of each transform mode
  double normalisation_;         // 1/n (FFT) or 1/(2(n+1)) (DST-I), folded into the kinetic phase
  struct KineticPhase {
    double dt;
    std::vector<std::complex<double>> phase;
  };
  std::vector<KineticPhase> kinetic_phases_;  // the few dt in use, most recent last (at most 4)
  RecentSamples samples_;
  StrangKicks kicks_;  // reused by every step (no allocation per step)
  // steps(): the kicks of one chunk and pointers to them and to the kinetic phases, allocated
  // at the first call and reused
  std::vector<std::complex<double>> chunk_kicks_;
  std::vector<const std::complex<double>*> kick_rows_, kinetic_rows_;
  std::vector<double> chunk_samples_;
  double max_phase_ = 0;
};

// Truncated instantaneous-eigenbasis propagator: expands in the K eigenstates phi_k (energies
// E_k) of one reference Hamiltonian p^2/2 + V_ref on the same grid and integrates
//   i dc/dt = [diag(E) + M(t)] c,   M_kl(t) = sum_j phi_k(x_j) dV(x_j, t) phi_l(x_j) dx,
//   dV = V(x, t) - V_ref(x),
// with Boost.Odeint's controlled runge_kutta_dopri5 (Dormand & Prince 1980) at the given
// absolute and relative tolerances. Exact up to the basis truncation and the tolerance;
// not symmetric in time, so Crooks holds only to the tolerance. State = K x columns.
//
// Two devices keep it cheap (both standard; derived here for this Hamiltonian):
// - Interaction picture: within each step from t0 it integrates a = exp(i E (t - t0)) c,
//   i da/dt = exp(i E s) M(t) exp(-i E s) a (s = t - t0), so the Dormand-Prince steps follow
//   the coupling M and its time dependence, not the phase E_K dt of the top basis level.
// - Shapes of the potential change: dV(x, t) = sum_r f_r(t) W_r(x) + remainder, with orthonormal
//   grid vectors W_r and their matrices M_r = Phi^T diag(W_r) Phi dx formed once, so an
//   evaluation costs r K^2 + 2 n r instead of n K^2. The shapes are found as the run goes: the
//   remainder dV - W f is bounded in its effect on M by sum_j |rem_j| rho_j (rho_j =
//   sum_k phi_k(x_j)^2 dx; a bound on the 2-norm of the neglected part of M), and where that is
//   above shape_limit (below) the remainder becomes a new shape (at most 64), after which M
//   is formed directly (n K^2). A rigid translation in the co-moving frame needs one or two
//   shapes, a ramped amplitude one per ramped term.
struct OdeTolerances {
  double absolute = 1e-10;
  double relative = 1e-10;
};

// Thrown by EigenbasisPropagator when its estimated arithmetic passes the limit it was given.
// Not a PhysicsError (nothing is wrong with the input; the caller set a budget), so it passes
// through propagate() unchanged.
// (run_work throws it too, before an eigenbasis run whose basis spectrum alone would pass the
// limit: basis = true, nothing spent.)
struct ArithmeticLimitReached : std::runtime_error {
  ArithmeticLimitReached(const std::string& what, double spent_, bool projected_, bool basis_ = false)
      : std::runtime_error(what), spent(spent_), projected(projected_), basis(basis_) {}
  double spent;    // the estimated arithmetic used when it stopped
  bool projected;  // stopped by the projection (below the limit), not past the limit
  bool basis;      // stopped before solving its basis, whose estimate alone passes the limit
};

class EigenbasisPropagator {
 public:
  using State = Eigen::MatrixXcd;  // basis coefficients x columns
  // reference.grid must equal path.grid() in size; v_reference = V_ref on the grid.
  // arithmetic_limit > 0: throw ArithmeticLimitReached once arithmetic() passes it, or once,
  // from a tenth of the protocol's duration on (the run starting at t = 0), the arithmetic so
  // far projected to the whole duration passes twice the limit. Any run throws PhysicsError
  // when its evaluations so far, projected to the whole duration, pass 6e9 (check_pace).
  EigenbasisPropagator(PotentialPath path, Spectrum reference, std::vector<double> v_reference,
                       OdeTolerances tolerances = {}, double arithmetic_limit = 0);
  void step(State& state, double t, double dt);
  int order() const { return 5; }
  int basis_size() const { return static_cast<int>(energies_.size()); }
  const PotentialPath& path() const { return path_; }
  // c = Phi^T psi dx (grid samples to coefficients) and back psi = Phi c.
  State coefficients(const Eigen::MatrixXcd& grid_states) const;
  Eigen::MatrixXcd grid_states(const State& coefficients) const;
  // Right-hand-side evaluations so far, and how many formed M directly (n K^2).
  long evaluations() const { return evaluations_; }
  long direct_evaluations() const { return direct_evaluations_; }
  int shapes() const { return static_cast<int>(shapes_.cols()); }
  // Estimated floating-point operations so far (products and sums of the evaluations, shape
  // matrices, direct formations; the potential samples counted as 10 per point).
  double arithmetic() const { return arithmetic_; }
  // The remainder bound above which dV gains a shape: tolerances.absolute / (100 max(tau, 1)),
  // so that a neglected part adds at most 1/100 of the tolerance over the run (never below
  // 1000 eps times the same bound of V itself, the rounding of dV = V - V_ref).
  double shape_limit() const { return shape_limit_; }
  // For an open-system integrator on the same basis (solver/noise.cpp, Lindblad route): the
  // basis energies E_k, the coupling M(t) (as step() forms it, counted in arithmetic()), and
  // Phi^T diag(w) Phi dx of another grid function w (n K^2, formed directly).
  const Eigen::VectorXd& energies() const { return energies_; }
  void coupling(double t, Eigen::MatrixXd& m) { matrix_at(t, m); }
  Eigen::MatrixXd project_function(const Eigen::VectorXd& w) const;

 private:
  void matrix_at(double t, Eigen::MatrixXd& m);
  void check_pace(double t);  // throws PhysicsError when the run projects past 6e9 evaluations
  PotentialPath path_;
  Eigen::MatrixXd basis_;  // n x K, phi_k(x_j) sqrt(dx): orthonormal columns
  Eigen::VectorXd energies_, density_;  // density_ = rho_j (row norms squared of basis_)
  std::vector<double> v_reference_;
  OdeTolerances tolerances_;
  double arithmetic_limit_ = 0, shape_limit_ = 0;
  Eigen::MatrixXd shapes_;                     // n x r, orthonormal
  std::vector<Eigen::MatrixXd> shape_matrices_;  // M_r, K x K
  std::vector<double> v_;                      // scratch: the potential sample
  Eigen::VectorXd dv_, f_, rem_;
  double step_hint_ = 0, arithmetic_ = 0;
  long evaluations_ = 0, direct_evaluations_ = 0, pace_calls_ = 0;
  double pace_start_ = 0;
};

// Advances y from t to t + dt (dt may be negative) with Boost.Odeint's controlled
// runge_kutta_dopri5 at the given tolerances, the steps chosen by its error control;
// step_hint carries the last accepted step size between calls (0: start at |dt| / 4).
// rhs(y, dydt, time). Throws PhysicsError after 200 rejected steps in a row.
using OdeRhs = std::function<void(const std::vector<double>& y, std::vector<double>& dydt, double time)>;
void integrate_controlled(const OdeRhs& rhs, std::vector<double>& y, double t, double dt,
                          const OdeTolerances& tolerances, double& step_hint);

// Amplitudes A(n, m) = <n|psi_m> = sum_j phi_n(x_j) psi_m(x_j) dx of grid states (columns) on
// the (real) eigenstates of a spectrum on the same grid; levels >= 0: only on its lowest levels
// (rows 0 to levels - 1).
Eigen::MatrixXcd project(const Spectrum& onto, const Eigen::MatrixXcd& states, Eigen::Index levels = -1);

// Sudden limit (tau = 0, U = 1): A(n, m) = <n_B|m_A>, overlaps of the eigenstates.
Eigen::MatrixXcd sudden_amplitudes(const Spectrum& initial, const Spectrum& final);

}  // namespace trapwork
