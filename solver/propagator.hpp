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
// Models: SplitOperatorPropagator (grid, order 2 or 4) and EigenbasisPropagator (truncated
// eigenbasis ODE, Boost.Odeint Dormand-Prince 5(4) with error control, reported order 5).
// Swapping one for the other is the cross-check. propagate() owns the loop and the observer.
#include <Eigen/Dense>
#include <cmath>
#include <complex>
#include <concepts>
#include <functional>
#include <limits>
#include <memory>
#include <mutex>
#include <optional>
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

// An observer is any callable taking (const State&, double t), returning void or bool;
// returning false stops the propagation. The default does nothing.
struct NoObserver {
  template <class State>
  void operator()(const State&, double) const {}
};

// Calls observer(state, t) at t = t_begin + i dt, dt = (t_end - t_begin)/steps, for
// i = 0 .. steps (the last time is exactly t_end), and steps in between. Each time is
// computed from i, not accumulated. Returns the number of steps taken (fewer than `steps`
// when the observer returned false). steps must be >= 1.
template <Propagator P, class Observer = NoObserver>
int propagate(P& propagator, typename P::State& state, double t_begin, double t_end, int steps,
              Observer&& observer = {}) {
  TRAPWORK_EXPECT(steps >= 1, "propagate needs steps >= 1");
  using State = typename P::State;
  auto notify = [&](double t) -> bool {
    if constexpr (std::is_same_v<std::invoke_result_t<Observer&, const State&, double>, void>) {
      observer(std::as_const(state), t);
      return true;
    } else {
      return static_cast<bool>(observer(std::as_const(state), t));
    }
  };
  const double dt = (t_end - t_begin) / steps;
  if (!notify(t_begin)) return 0;
  for (int i = 0; i < steps; ++i) {
    const double t = t_begin + i * dt;
    const double t_next = i + 1 == steps ? t_end : t_begin + (i + 1) * dt;
    propagator.step(state, t, t_next - t);
    if (!notify(t_next)) return i + 1;
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
  // v[j] = V(x_j, t) in the frame (resized to the grid size).
  void sample(double t, std::vector<double>& v) const;
  std::vector<double> sample(double t) const;
  // Frame wavefunctions (columns) <-> lab wavefunctions at time t; identity in the lab frame.
  void to_lab(Eigen::MatrixXcd& states, double t) const;
  void from_lab(Eigen::MatrixXcd& states, double t) const;
  // Displacement d(t) of the frame (0 in the lab frame).
  double displacement(double t) const;

 private:
  PotentialPath(Grid grid, Potential base, Protocol protocol, std::optional<Translation> translation);
  void frame_phase(Eigen::MatrixXcd& states, double t, double sign) const;
  Grid grid_;
  Potential base_;      // lab: the base potential; co-moving: V_0 = protocol.initial(base)
  Protocol protocol_;
  std::optional<Translation> translation_;
  std::vector<double> points_;
};

enum class SplitOrder { strang = 2, fourth = 4 };

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
template <class Strang>
void triple_jump(Strang&& strang, double t, double dt) {
  const double cbrt2 = std::cbrt(2.0);
  const double g1 = 1 / (2 - cbrt2), g0 = -cbrt2 / (2 - cbrt2);
  strang(t, g1 * dt);
  strang(t + g1 * dt, g0 * dt);
  strang(t + (g1 + g0) * dt, t + dt - (t + (g1 + g0) * dt));
}

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
// Construction plans the FFTs once (FFTW_MEASURE on the propagator's own buffer, before any
// data is written; fftw_plan_many_dft over all columns, or a guru r2r RODFT00 plan over the
// real and imaginary parts for a box) with `threads` FFTW threads. step() only multiplies and
// executes. Move-only.
class SplitOperatorPropagator {
 public:
  using State = Eigen::MatrixXcd;  // grid points x columns, samples psi(x_j)
  SplitOperatorPropagator(PotentialPath path, int columns, SplitOrder order = SplitOrder::fourth, int threads = 1);
  ~SplitOperatorPropagator();
  SplitOperatorPropagator(SplitOperatorPropagator&&) noexcept;
  SplitOperatorPropagator& operator=(SplitOperatorPropagator&&) noexcept;
  SplitOperatorPropagator(const SplitOperatorPropagator&) = delete;
  SplitOperatorPropagator& operator=(const SplitOperatorPropagator&) = delete;

  void step(State& state, double t, double dt);
  int order() const { return static_cast<int>(order_); }
  const PotentialPath& path() const { return path_; }
  int columns() const { return columns_; }
  // Largest |V| dt/2 and T_max dt of the last step (radians): the phase per step, a
  // time-step diagnostic (large values mean the step does not resolve the fastest phases).
  double max_phase() const { return max_phase_; }

 private:
  struct Plans;
  void strang(State& state, double t, double dt);
  const std::vector<double>& potential_at(double t);
  PotentialPath path_;
  int columns_;
  SplitOrder order_;
  std::unique_ptr<Plans> plans_;
  RecentSamples samples_;
  std::vector<std::complex<double>> kick_;  // reused by every step (no allocation per step)
  double max_phase_ = 0;
};

// Truncated instantaneous-eigenbasis propagator: expands in the K eigenstates phi_k (energies
// E_k) of one reference Hamiltonian p^2/2 + V_ref on the same grid and integrates
//   i dc/dt = [diag(E) + M(t)] c,   M_kl(t) = sum_j phi_k(x_j) (V(x_j, t) - V_ref(x_j)) phi_l(x_j) dx
// with Boost.Odeint's controlled runge_kutta_dopri5 (Dormand & Prince 1980) at the given
// absolute and relative tolerances. Exact up to the basis truncation and the tolerance;
// not symmetric in time, so Crooks holds only to the tolerance. State = K x columns.
struct OdeTolerances {
  double absolute = 1e-10;
  double relative = 1e-10;
};

class EigenbasisPropagator {
 public:
  using State = Eigen::MatrixXcd;  // basis coefficients x columns
  // reference.grid must equal path.grid() in size; v_reference = V_ref on the grid.
  EigenbasisPropagator(PotentialPath path, Spectrum reference, std::vector<double> v_reference,
                       OdeTolerances tolerances = {});
  void step(State& state, double t, double dt);
  int order() const { return 5; }
  int basis_size() const { return static_cast<int>(energies_.size()); }
  const PotentialPath& path() const { return path_; }
  // c = Phi^T psi dx (grid samples to coefficients) and back psi = Phi c.
  State coefficients(const Eigen::MatrixXcd& grid_states) const;
  Eigen::MatrixXcd grid_states(const State& coefficients) const;
  // Right-hand-side evaluations so far (each costs n K^2 for the matrix M).
  long evaluations() const { return evaluations_; }

 private:
  PotentialPath path_;
  Eigen::MatrixXd basis_;  // n x K, phi_k(x_j) sqrt(dx): orthonormal columns
  Eigen::VectorXd energies_;
  std::vector<double> v_reference_;
  OdeTolerances tolerances_;
  double step_hint_ = 0;
  long evaluations_ = 0;
};

// Amplitudes A(n, m) = <n|psi_m> = sum_j phi_n(x_j) psi_m(x_j) dx of grid states (columns) on
// the (real) eigenstates of a spectrum on the same grid.
Eigen::MatrixXcd project(const Spectrum& onto, const Eigen::MatrixXcd& states);

// Sudden limit (tau = 0, U = 1): A(n, m) = <n_B|m_A>, overlaps of the eigenstates.
Eigen::MatrixXcd sudden_amplitudes(const Spectrum& initial, const Spectrum& final);

}  // namespace trapwork
