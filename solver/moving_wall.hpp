#pragma once
// Moving hard walls: compression and expansion of box-like traps, with work statistics in
// the two-point measurement scheme (hbar = m = 1, internal units of solver/units.hpp).
//
// Lab frame: i d psi/dt = [-(1/2) d^2/dx^2 + V(x, t)] psi on a(t) < x < b(t), psi = 0 at the
// walls, L(t) = b - a > 0. The dilation x = a(t) + L(t) y, y in [0, 1], with
//   psi(x, t) = L^{-1/2} exp(i theta(y, t)) phi(y, t),
//   theta(y, t) = L a' y + L L' y^2 / 2 + gamma(t),   gamma(t) = (1/2) int_0^t a'^2 dt',
// maps the moving box onto the fixed one (derived by substitution; the choice of theta
// removes the first-derivative term, L^{-1/2} keeps the norm, gamma the time-only remainder):
//   i d phi/dt = [-(1/(2 L^2)) d^2/dy^2 + (1/2) L L'' y^2 + L a'' y + V(a + L y, t)] phi.
// (with m: theta = m (L a' y + L L' y^2/2)/hbar, potential (m/2) L L'' y^2 + m L a'' y.)
// Lab eigenstates sqrt(2/L) sin(k pi (x - a)/L) become chi_k(y) = sqrt(2) sin(k pi y) times
// exp(-i theta): where L' or a' is not zero at t = 0 or tau, the chirp is applied at the ends
// (from_lab, to_lab), so that both TPM projections are on lab-frame eigenstates.
// For a flat box with one wall at constant speed the dilated equation is free (L'' = a'' = 0):
// this is the Doescher-Rice solution (Am. J. Phys. 37, 1246 (1969), from memory).
#include <Eigen/Dense>
#include <complex>
#include <limits>
#include <memory>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "potentials/potential.hpp"
#include "potentials/protocol.hpp"
#include "solver/errors.hpp"
#include "solver/grid.hpp"
#include "solver/propagator.hpp"
#include "solver/work.hpp"

namespace trapwork {

// The walls and their motion at one time.
struct WallState {
  ScheduleValue left, right;  // a, a', a'' and b, b', b''
  double length() const { return right.value - left.value; }
  double rate() const { return right.rate - left.rate; }                  // L'
  double acceleration() const { return right.acceleration - left.acceleration; }  // L''
};

// Left wall a(t), right wall b(t) over [0, tau], and an optional inner potential V(x, t) inside
// the box, itself optionally scheduled (its own Protocol over the same tau). The wall schedules'
// addresses must be "<name>.left" and "<name>.right" with one name (say "walls"): the same
// schedules then drive a soft-wall Potential term of that name (soft_walls()).
// The walls meet or cross: b - a = width <= 0 at `time` (internal units, kept so that the
// tool can say them in lab units).
struct WallsMeetError : PhysicsError {
  double time, width;
  WallsMeetError(const std::string& what, double time_, double width_)
      : PhysicsError(what), time(time_), width(width_) {}
};

class WallProtocol {
 public:
  // Throws InputError for mismatched addresses, tau < 0, or an inner schedule the inner
  // potential does not have; WallsMeetError if L(t) <= 0 anywhere (checked at 1025 equally
  // spaced times, ends included).
  WallProtocol(double tau, Schedule left, Schedule right, Potential inner = {},
               std::vector<Schedule> inner_schedules = {});
  // Static left wall at `left`, right wall moved linearly from right_from to right_to.
  static WallProtocol linear_right(double left, double right_from, double right_to, double tau,
                                   Potential inner = {});

  double duration() const { return tau_; }
  const std::string& name() const { return name_; }
  const Schedule& left() const { return left_; }
  const Schedule& right() const { return right_; }
  const Potential& inner() const { return inner_; }
  const std::vector<Schedule>& inner_schedules() const { return inner_protocol_.schedules(); }
  bool flat() const { return inner_.terms().empty(); }
  WallState walls(double t) const;
  WallState initial_walls() const;  // at t = 0 (tau = 0: the walls before the sudden change)
  WallState final_walls() const;    // at t = tau (tau = 0: after it)
  // Inner potential with its schedules applied at t (empty potential for a flat box).
  Potential inner_at(double t) const;
  // Inner potential before and after the protocol (for tau = 0: before and after the switch).
  Potential initial_inner() const;
  Potential final_inner() const;
  // lambda_R(t) = lambda(tau - t) for the walls and the inner schedules.
  WallProtocol reversed() const;
  // All schedules (walls and inner) as one Protocol, for a Potential holding a soft-wall term
  // called name() next to the inner terms.
  Protocol as_protocol() const;
  // One wall moves at constant speed, the other stands, and the box is flat: the
  // Doescher-Rice case. Returns the speed u of the moving wall's outward motion (dL/dt).
  std::optional<double> constant_speed() const;

 private:
  double tau_;
  std::string name_;
  Schedule left_, right_;
  Potential inner_;
  Protocol inner_protocol_;
};

// ---- propagation on the dilated box ----------------------------------------------------

// Split-operator on the fixed box y in [0, 1] (Grid::box(0, 1, n), DST-I = FFTW RODFT00,
// planned once for all columns). One Strang step from t to t + dt:
//   exp(-i W(t+dt) dt/2) exp(-i T_0 int_t^{t+dt} ds/L(s)^2) exp(-i W(t) dt/2),
// T_0 = diag(k^2 pi^2/2), W(y, t) = (1/2) L L'' y^2 + L a'' y + V(a + L y, t). The kinetic
// flow is exact (T_0 commutes with itself at all times; the integral by 5-point
// Gauss-Legendre, error O(dt^11)), so the step is Strang splitting of the extended
// autonomous system: second order and symmetric, U_R = U_F^T for the mirrored protocol.
// Fourth order: the Yoshida triple jump, as SplitOperatorPropagator (solver/propagator.hpp).
// Models the Propagator concept, so propagate() (solver/propagator.hpp) drives it. Each step
// runs the fused, cache-blocked batch pass of solver/propagator.hpp (BatchedSplitStep) over
// `threads` worker threads owned by the propagator; results do not depend on `threads`.
// State: n x columns, samples phi(y_j) with sum_j |phi_j|^2 dy = 1.
class WallSplitOperatorPropagator {
 public:
  using State = Eigen::MatrixXcd;
  // points >= 4, columns >= 1, threads >= 1.
  WallSplitOperatorPropagator(WallProtocol protocol, std::size_t points, int columns,
                              SplitOrder order = SplitOrder::fourth, int threads = 1);
  ~WallSplitOperatorPropagator();
  WallSplitOperatorPropagator(WallSplitOperatorPropagator&&) noexcept;
  WallSplitOperatorPropagator& operator=(WallSplitOperatorPropagator&&) noexcept;
  WallSplitOperatorPropagator(const WallSplitOperatorPropagator&) = delete;
  WallSplitOperatorPropagator& operator=(const WallSplitOperatorPropagator&) = delete;

  void step(State& state, double t, double dt);
  int order() const { return static_cast<int>(order_); }
  const Grid& grid() const { return grid_; }
  const WallProtocol& protocol() const { return protocol_; }
  // Largest |W| |dt|/2 and T_max |dt|/L^2 of the last step (radians).
  double max_phase() const { return max_phase_; }
  // Frame <-> lab: multiply by exp(+- i theta(y_j, t)). to_lab gives sqrt(L) psi(a + L y_j, t),
  // normalised on the y grid.
  void to_lab(State& state, double t) const;
  void from_lab(State& state, double t) const;

 private:
  void strang(State& state, double t, double dt);
  const std::vector<double>& potential_at(double t);
  void sample_potential(double t, std::vector<double>& v) const;  // frame potential at t
  WallProtocol protocol_;
  Grid grid_;
  std::vector<double> y_;
  int columns_;
  SplitOrder order_;
  BatchedSplitStep pass_;
  RecentSamples samples_;
  StrangKicks kicks_;                          // reused by every step (no allocation per step)
  std::vector<std::complex<double>> kinetic_;  // exp(-i T_0 lambda) / (2(n + 1)), per substep
  double max_phase_ = 0;
};

// Independent cross-check: the fixed-sine-basis ODE on the dilated box without the chirp.
// With psi = L^{-1/2} sum_k c_k chi_k((x - a)/L), c_k = <phi_k^{L(t)}|psi> (lab amplitudes):
//   i dc_k/dt = (k^2 pi^2/(2 L^2)) c_k + sum_n V_kn(t) c_n
//               + i (L'/L) sum_n M_kn c_n + i (a'/L) sum_n D_kn c_n,
//   M_kn = <chi_k|y d/dy + 1/2|chi_n> = -(-1)^{k+n} 2kn/(k^2 - n^2)  (0 for k = n),
//   D_kn = <chi_k|d/dy|chi_n> = 4kn/(k^2 - n^2) for k + n odd, else 0,
//   V_kn = int_0^1 chi_k V(a + L y, t) chi_n dy (Gauss-Legendre, 2K + 64 nodes).
// (Derived by substitution; M and D are real antisymmetric, so the flow is unitary.)
// Integrated with Boost.Odeint's controlled runge_kutta_dopri5 at the given tolerances. Cost
// grows steeply with K (explicit steps resolve the highest mode, E_K dt ~ 1): K <~ 100.
class WallEigenbasisPropagator {
 public:
  using State = Eigen::MatrixXcd;  // K x columns
  WallEigenbasisPropagator(WallProtocol protocol, int modes, OdeTolerances tolerances = {});
  void step(State& state, double t, double dt);
  int order() const { return 5; }
  int modes() const { return modes_; }
  // The K x K Hamiltonian diag(k^2 pi^2/(2 L^2)) + V_kn at t (lab eigenstates: its eigenvectors).
  Eigen::MatrixXd hamiltonian(double t) const;
  long evaluations() const { return evaluations_; }

 private:
  WallProtocol protocol_;
  int modes_;
  OdeTolerances tolerances_;
  Eigen::MatrixXd m_, d_;
  Eigen::VectorXd nodes_, weights_;
  Eigen::MatrixXd chi_;  // chi_k at the nodes, times sqrt(weight)
  double step_hint_ = 0;
  long evaluations_ = 0;
};

// Amplitudes A(n, m) = <n_B|U|m_A> from the basis ODE: eigenvectors of hamiltonian(0) and
// hamiltonian(tau), the first `initial` of them propagated, projected on `final` final ones.
Eigen::MatrixXcd wall_eigenbasis_amplitudes(const WallProtocol& protocol, int modes, int initial, int final,
                                            OdeTolerances tolerances = {});

// ---- closed forms ---------------------------------------------------------------------

// Gauss-Legendre nodes and weights on [0, 1] (Newton iteration on the three-term recurrence
// from the Chebyshev-like first guesses; common practice, Numerical Recipes "gauleg", from
// memory). Accurate to a few ulp for n up to several thousand.
void gauss_legendre(int n, Eigen::VectorXd& nodes, Eigen::VectorXd& weights);

// Chirp matrix G(theta)_kn = 2 int_0^1 sin(k pi y) sin(n pi y) exp(i theta y^2) dy, k, n = 1..K,
// by Gauss-Legendre quadrature with ceil(pi K + |theta|) + 40 nodes (the integrand's largest
// wavenumber is 2 pi K + 2 |theta| on [0, 1]; Gauss error ~ (e kappa/(4 N))^{2N}). Returns the
// first `rows` rows (0: all K).
Eigen::MatrixXcd chirp_matrix(double theta, int modes, int rows = 0);

// Doescher-Rice amplitudes A_km = <phi_k^{L1}|U|phi_m^{L0}>, k, m = 1..K (index 0..K-1) for a
// flat box [0, L(t)], L(t) = L0 + u t, tau = (L1 - L0)/u:
//   A = G(u L1/2) diag(exp(-i n^2 pi^2 tau/(2 L0 L1))) G(-u L0/2),
// the intermediate sum over n <= `modes` (0: K + 100), for the first `initial` columns (0: K).
// Exact solutions of Doescher & Rice, Am. J. Phys. 37, 1246 (1969) (from memory). Throws
// PhysicsError unless L0, L1 > 0 and u has the sign of L1 - L0 (u = 0 only when L1 = L0).
Eigen::MatrixXcd doescher_rice_amplitudes(double L0, double L1, double u, int K, int modes = 0, int initial = 0);
// Estimated floating-point operations of doescher_rice_amplitudes with the same arguments: its
// two chirp quadratures of pi modes + |u L|/2 + 40 nodes (Gauss-Legendre nodes by recurrence,
// ~10 n^2) and their products.
double doescher_rice_operations(double L0, double L1, double u, int K, int modes = 0, int initial = 0);

// Sudden expansion [a0, b0] -> [a1, b1] with a1 <= a0, b0 <= b1 (flat box): overlaps
// A(n, m) = <n_B|m_A> = int_{a0}^{b0} phi_n^B phi_m^A dx, n < final, m < initial, in closed form
// (derived here): with r = L/L', phase phi = n pi (a0 - a1)/L', alpha = n pi r,
//   A = 2 sqrt(r) (1/2)[cos(phi + e/2) sinc(e/2) - cos(phi + h/2) sinc(h/2)],
//   e = alpha - m pi, h = alpha + m pi, sinc z = sin z / z.
// For a0 = a1 this is (2 sqrt(r)/pi) (-1)^m m sin(n pi r)/(n^2 r^2 - m^2) (= sqrt(r) at n r = m),
// written without the cancellation near n r = m. Throws PhysicsError for a compression (a
// wall moved inward), stating the weight of the ground state outside the new box: the
// projection would be a post-selected position measurement, not a unitary protocol, and the
// cut state has infinite energy in the new box.
Eigen::MatrixXcd sudden_wall_amplitudes(double a0, double b0, double a1, double b1, int initial, int final);

// Weight of the box eigenstate phi_m^{[a, b]} (m = 0, 1, ...) inside [c, d] (a <= c < d <= b):
// (s - sin(2 (m+1) pi s)/(2 (m+1) pi)) between s = (c-a)/L and (d-a)/L.
double box_state_weight_inside(double a, double b, int m, double c, double d);

// Flat-box levels E_k = (k pi/L)^2/2 and states sqrt(2/L) sin(k pi (x - a)/L) on Grid::box(a, b, n):
// exact eigenpairs of the sine-basis kinetic operator.
Spectrum flat_box_spectrum(double a, double b, std::size_t points, int levels);

// ---- the TPM driver ------------------------------------------------------------------

struct WallWorkRequest {
  InitialState initial = InitialState::thermal(1);
  double thermal_tolerance = 1e-12;  // eps_K
  int max_initial_levels = 80;
  int min_initial_levels = 0;        // Gibbs states: keep at least these (run_wall_work raises it)
  int final_margin = 24;             // final levels = kept initial levels + margin
  std::size_t points = 511;          // sine modes (interior points) on the dilated box; the DST-I
                                     // is an FFT of 2 (points + 1): keep points + 1 smooth
  int steps = 0;                     // 0: automatic, E_max dt <= phase_per_step
  double phase_per_step = 0;         // automatic steps; 0: 0.2 (order 4), 0.02 (Strang)
  SplitOrder order = SplitOrder::fourth;
  int threads = 1;                   // propagator worker threads (results independent of it)
  bool reverse_run = true;
  bool time_step_check = true;
  bool grid_check = true;            // same run on twice the points, where the grid limits it
  double merge_tolerance = 1e-9;
  SpectrumOptions spectrum;          // inner potential: eigensolver on Grid::box(a, b, points)
  int sudden_final_levels = 400;     // sudden expansion: final levels from the closed form
  double unresolved_tolerance = 1e-8;  // escape probabilities above this enlarge the levels
  std::function<void(double fraction)> progress;  // optional, called with 0..1 (per attempt)
};

// Line-by-line comparison with the Doescher-Rice exact amplitudes.
// The reference moments use `levels` final levels (at least 4 times the run's, at most 1024),
// the run's initial levels and weights: they judge the run's final-level truncation too.
struct DoescherRiceComparison {
  double speed = 0;                // u = L'
  int levels = 0;                  // final levels of the reference moments
  double max_line_difference = 0;  // max |P(m->n) - P_DR(m->n)| over the computed lines
  double mean_work = 0;            // <W> from the DR probabilities over `levels` final levels
  double mean_work_error = 0;      // |<W>(levels) - <W>(levels/2)|
  double variance = 0;             // var W over `levels` final levels
  double variance_error = 0;       // 2 |var(levels) - var(levels/2)| (var W converges as 1/levels
                                   // when the wall moves at the ends)
  double mean_work_difference = 0; // numerical <W> - DR <W>
};

// Sudden hard-wall expansion: the Hilbert space changes, sum_m P(m -> n) = int_A |phi_n^B|^2
// < 1, and Jarzynski fails by a known amount (Quan & Jarzynski, PRE 85, 031102 (2012), journal
// reference from memory; Teifel & Mahler, EPJB 75, 275 (2010)):
//   <exp(-beta W)> = (1/Z_A) sum_n exp(-beta E_n^B) int_A |phi_n^B|^2   (all initial levels).
struct SuddenJarzynski {
  double average = 0;          // the closed-form <exp(-beta W)> above
  double partition_ratio = 0;  // Z_B/Z_A
  double ratio = 0;            // average / partition_ratio (1/2 for L -> 2L)
};

struct WallWorkResult {
  WorkResult work;  // forward/reverse inputs, distributions, Crooks, diagnostics
  std::optional<DoescherRiceComparison> doescher_rice;
  std::string doescher_rice_absent;  // why a constant-speed wall has no exact reference (else empty)
  std::optional<SuddenJarzynski> sudden;
  // max |dP(m -> n)| with twice the sine modes; NaN where not computed (grid_check off).
  double grid_line_change = std::numeric_limits<double>::quiet_NaN();
};

// The whole TPM calculation for moving walls: levels of H_A and H_B (analytic for the flat box,
// solve_spectrum on Grid::box otherwise), initial weights (solver/thermal.hpp), one batched
// split-operator run of the kept levels on the dilated box (chirp at the ends), projection on
// the final lab eigenstates, reverse run, work distributions, Crooks, the truncation terms of
// the Jarzynski residual, norm drift, time-step error (half step), and the DR reference where
// it applies. tau = 0: sudden expansion (compression refused, see sudden_wall_amplitudes) from
// the closed-form overlaps, for an inner potential through the sine coefficients of both grid
// spectra (exact for the grid eigenvectors), with the Jarzynski failure reported in `sudden`
// and a warning.
WallWorkResult run_wall_work(const WallProtocol& protocol, const WallWorkRequest& request);

// Adiabatic limit: P(m -> n) = delta_mn, W_m = E_m^B - E_m^A (no level crossings in a box).
WorkDistribution adiabatic_wall_work(const Eigen::VectorXd& initial_energies, const Eigen::VectorXd& final_energies,
                                     const std::vector<double>& weights);

// ---- soft walls ------------------------------------------------------------------------

// Power-law walls at the hard walls' places: the Potential term `name` of shape power_walls
// (potentials/potential.hpp), height ((x - right)/width)^power beyond right, mirrored at left, so
// that the WallProtocol's schedules "<name>.left" and "<name>.right" move it on an ordinary grid.
struct SoftWallShape {
  double height = 1e3;  // > 0 (internal energy units)
  double power = 8;     // > 0
};
Term soft_walls(const std::string& name, const SoftWallShape& shape, double width, double left, double right);

// Soft walls converge to hard ones as they steepen (width -> 0 at fixed height and power). The
// ground-state penetration into h (s/w)^p scales as s_0 = (w^p/h)^{1/(p+2)} (kinetic 1/s_0^2
// against h (s_0/w)^p; derived here), so the soft box acts as a hard one about s_0 wider and
// differences fall as w^{p/(p+2)} (0.8 for p = 8) once w is small.
struct SoftWallRequest {
  SoftWallShape shape;
  std::vector<double> widths;         // each > 0; compared in the order given (largest first)
  std::size_t points = 0;             // soft-run grid points; 0: spacing <= width/6 (>= 256)
  double numerical_tolerance = 1e-4;  // steps doubled until a run moves by less (line distance)
  int max_doublings = 5;              // the cost bound: at most 2^(max_doublings + 1) times the
                                      // first run's steps per width; the last distance is the
                                      // error reported (SoftWallRun::converged says if it is met)
  std::function<void(double fraction)> progress;  // optional, 0..1 over all widths
};

// One soft-wall run against the hard-wall result (forward runs, the same initial state).
struct SoftWallRun {
  double width = 0;
  std::size_t points = 0;
  int steps = 0;
  double mean_work = 0;             // soft <W>
  double mean_work_difference = 0;  // soft - hard
  LineDistance distance;            // line distance (work.hpp) from the hard-wall lines
  double numerical_error = 0;       // line distance between the last two step counts, and to a
                                    // grid of 3/2 the points (the larger)
  bool converged = false;           // numerical_error <= numerical_tolerance
};

struct SoftWallComparison {
  double hard_mean_work = 0;
  std::vector<SoftWallRun> runs;
  // From the last three widths when they halve (w, w/2, w/4): the observed order alpha of
  // <W>(w) - <W>(0) ~ w^alpha, and the extrapolation of the soft <W> to w = 0 (Richardson with
  // the observed order), to compare with the hard-wall <W>. NaN when not available.
  double observed_order = std::numeric_limits<double>::quiet_NaN();
  double extrapolated_mean_work = std::numeric_limits<double>::quiet_NaN();
};

// The soft-wall problem through run_work (solver/work.hpp) on a hard-walled grid reaching 1.25
// widths beyond the walls' widest positions, for each width, against the forward lines of
// `hard` (run_wall_work of `protocol` with `hard_request`), the same initial state and levels
// (no reverse runs). Throws InputError for a width <= 0.
SoftWallComparison compare_soft_walls(const WallProtocol& protocol, const WallWorkResult& hard,
                                      const WallWorkRequest& hard_request, const SoftWallRequest& soft);

}  // namespace trapwork
