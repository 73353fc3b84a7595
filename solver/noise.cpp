#include "solver/noise.hpp"

#include <fftw3.h>

#include <algorithm>
#include <atomic>
#include <cmath>
#include <exception>
#include <limits>
#include <memory>
#include <mutex>
#include <optional>
#include <random>
#include <thread>
#include <unordered_map>

#include "solver/errors.hpp"
#include "solver/grid.hpp"
#include "solver/hamiltonian.hpp"
#include "solver/propagator.hpp"
#include "solver/thermal.hpp"
#include "solver/units.hpp"

namespace trapwork {

// ---- spectra and conversions ----------------------------------------------------------------

NoiseSpectrum NoiseSpectrum::white(double level) {
  if (!(level >= 0) || !std::isfinite(level))
    throw InputError("noise", format_number(level), "a white noise level >= 0 and finite");
  NoiseSpectrum s;
  s.level_ = level;
  return s;
}

NoiseSpectrum NoiseSpectrum::table(std::vector<double> frequency, std::vector<double> density) {
  if (frequency.size() != density.size() || frequency.size() < 2)
    throw InputError("noise", std::to_string(frequency.size()) + " rows",
                     "a PSD table of at least 2 rows (frequency, density)");
  for (std::size_t i = 0; i < frequency.size(); ++i) {
    if (!std::isfinite(frequency[i]) || frequency[i] < 0 || (i > 0 && !(frequency[i] > frequency[i - 1])))
      throw InputError("noise", "frequency " + format_number(frequency[i]) + " in row " + std::to_string(i + 1),
                       "frequencies >= 0, strictly increasing");
    if (!std::isfinite(density[i]) || density[i] < 0)
      throw InputError("noise", "density " + format_number(density[i]) + " in row " + std::to_string(i + 1),
                       "densities >= 0 and finite");
  }
  NoiseSpectrum s;
  s.frequency_ = std::move(frequency);
  s.density_ = std::move(density);
  return s;
}

double NoiseSpectrum::operator()(double f) const {
  if (frequency_.empty()) return level_;
  if (f < frequency_.front() || f > frequency_.back()) return 0;
  const auto hi = std::upper_bound(frequency_.begin(), frequency_.end(), f);
  if (hi == frequency_.end()) return density_.back();
  const std::size_t k = std::size_t(hi - frequency_.begin());
  const double u = (f - frequency_[k - 1]) / (frequency_[k] - frequency_[k - 1]);
  return density_[k - 1] + u * (density_[k] - density_[k - 1]);
}

// dn/dt = omega^3 S_x / 4 (m = hbar = 1; derived in tests/test_noise.cpp).
double position_psd_from_heating_rate(double quanta_per_time, double omega) {
  TRAPWORK_EXPECT(omega > 0, "position_psd_from_heating_rate: omega must be > 0");
  return 4 * quanta_per_time / (omega * omega * omega);
}

double heating_rate_from_position_psd(double psd, double omega) { return omega * omega * omega * psd / 4; }

std::string noise_psd_convention() {
  return "one-sided power spectral density per ordinary frequency (Hz): the integral of S(f) over f >= 0 is "
         "the variance; white noise S has <eps(t) eps(t')> = (S/2) delta(t - t')";
}

// ---- traces -------------------------------------------------------------------------------

double NoiseTrace::operator()(double t) const {
  const int n = int(values.size()) - 1;
  if (n < 1) return values.empty() ? 0.0 : values.front();
  const double u = t / tau * n;
  const int i = std::clamp(int(std::floor(u)), 0, n - 1);  // end segments continued outside
  const double s = u - i;
  return values[std::size_t(i)] + s * (values[std::size_t(i) + 1] - values[std::size_t(i)]);
}

namespace {

// Uniform on (0, 1) from the top 53 bits of one 64-bit draw (never 0, for the logarithm).
double uniform_open(std::mt19937_64& engine) { return (double(engine() >> 11) + 0.5) * 0x1.0p-53; }

// Box-Muller (common practice): two N(0, 1) samples from two uniforms, written out so that the
// samples do not depend on the standard library's normal_distribution.
void fill_gaussian(std::mt19937_64& engine, std::vector<double>& out) {
  const double two_pi = 2 * si::pi;
  for (std::size_t i = 0; i < out.size(); i += 2) {
    const double r = std::sqrt(-2 * std::log(uniform_open(engine)));
    const double phi = two_pi * uniform_open(engine);
    out[i] = r * std::cos(phi);
    if (i + 1 < out.size()) out[i + 1] = r * std::sin(phi);
  }
}

}  // namespace

NoiseTrace noise_trace(const NoiseSpectrum& spectrum, double tau, int intervals, std::uint64_t seed,
                       std::uint64_t realisation, std::uint64_t source) {
  TRAPWORK_EXPECT(tau > 0 && intervals >= 1, "noise_trace needs tau > 0 and intervals >= 1");
  NoiseTrace trace;
  trace.tau = tau;
  trace.values.assign(std::size_t(intervals) + 1, 0.0);
  const double dt = tau / intervals;
  std::seed_seq sequence{std::uint32_t(seed), std::uint32_t(seed >> 32), std::uint32_t(realisation),
                         std::uint32_t(realisation >> 32), std::uint32_t(source)};
  std::mt19937_64 engine(sequence);
  if (spectrum.is_white()) {  // the filter has a flat gain: the nodes are i.i.d. directly
    if (spectrum.white_level() == 0) return trace;
    fill_gaussian(engine, trace.values);
    const double sigma = std::sqrt(spectrum.white_level() / (2 * dt));
    for (double& v : trace.values) v *= sigma;
    return trace;
  }
  const std::size_t m = fast_fft_size(2 * std::size_t(intervals) + 2);
  std::vector<double> white(m);
  fill_gaussian(engine, white);
  std::vector<fftw_complex> modes(m / 2 + 1);
  fftw_plan forward, backward;
  {
    std::lock_guard lock(fftw_planner_mutex());
    forward = fftw_plan_dft_r2c_1d(int(m), white.data(), modes.data(), FFTW_ESTIMATE);
    backward = fftw_plan_dft_c2r_1d(int(m), modes.data(), white.data(), FFTW_ESTIMATE);
  }
  fftw_execute(forward);
  // gain sqrt(S(f_k) / (2 dt)) and FFTW's factor 1/m of the round trip
  for (std::size_t k = 0; k < modes.size(); ++k) {
    const double gain = std::sqrt(spectrum(double(k) / (double(m) * dt)) / (2 * dt)) / double(m);
    modes[k][0] *= gain;
    modes[k][1] *= gain;
  }
  fftw_execute(backward);
  {
    std::lock_guard lock(fftw_planner_mutex());
    fftw_destroy_plan(forward);
    fftw_destroy_plan(backward);
  }
  std::copy_n(white.begin(), trace.values.size(), trace.values.begin());
  return trace;
}

// ---- realisations -------------------------------------------------------------------------

namespace {

// dV/dp(x) of the potential `at` by a central difference in p (header comment), added to
// `out` times `weight`. up and down are scratch.
void add_derivative(const Potential& at, const std::string& address, const std::vector<double>& x, double weight,
                    std::vector<double>& out, std::vector<double>& up, std::vector<double>& down) {
  up.resize(x.size());
  down.resize(x.size());
  const double p = at.parameter(address);
  double h = 1e-4 * std::max(std::abs(p), 1.0);
  if (p > 0 && p - h <= 0) h = 1e-4 * p;  // a positive parameter near 0 (a depth, a waist)
  at.with(address, p + h).evaluate(x.data(), up.data(), x.size());
  at.with(address, p - h).evaluate(x.data(), down.data(), x.size());
  const double factor = weight / (2 * h);
  for (std::size_t j = 0; j < x.size(); ++j) out[j] += factor * (up[j] - down[j]);
}

// The factor of a source's noise at the potential `at`: p(t) for relative noise (eps = p eps_rel,
// noise.hpp), 1 otherwise.
double noise_scale(const Potential& at, const NoiseSource& source) {
  return source.relative ? at.parameter(source.address) : 1.0;
}

// dV/dp at each time the propagation samples the potential: the same times in every
// realisation (the same step subdivision), so computed once and shared read-only.
struct DerivativeTable {
  std::unordered_map<double, std::size_t> row;  // sample time -> first row (one row per source)
  std::vector<std::vector<double>> values;
};

// The noise term sum_p eps_p(t) dV/dp(x, t) at lab positions x. dV/dp from the shared table
// when it holds the time, else computed here. Holds its own copies, so one instance per thread.
class ParameterNoise {
 public:
  // The table's rows include the factor noise_scale.
  ParameterNoise(Potential base, Protocol protocol, std::vector<NoiseSource> sources, std::vector<NoiseTrace> traces,
                 std::shared_ptr<const DerivativeTable> table)
      : base_(std::move(base)), protocol_(std::move(protocol)), sources_(std::move(sources)),
        traces_(std::move(traces)), table_(std::move(table)) {}
  void operator()(double t, const std::vector<double>& x, std::vector<double>& v) {
    bool any = false;
    for (const auto& trace : traces_) any = any || trace(t) != 0;
    if (!any) return;  // zero noise leaves the potential bit for bit
    if (table_) {
      if (const auto it = table_->row.find(t); it != table_->row.end()) {
        for (std::size_t k = 0; k < sources_.size(); ++k) {
          const double eps = traces_[k](t);
          const std::vector<double>& d = table_->values[it->second + k];
          for (std::size_t j = 0; j < x.size(); ++j) v[j] += eps * d[j];
        }
        return;
      }
    }
    const Potential at = protocol_.at(base_, t);
    for (std::size_t k = 0; k < sources_.size(); ++k)
      if (const double eps = traces_[k](t); eps != 0)
        add_derivative(at, sources_[k].address, x, eps * noise_scale(at, sources_[k]), v, up_, down_);
  }

 private:
  Potential base_;
  Protocol protocol_;
  std::vector<NoiseSource> sources_;
  std::vector<NoiseTrace> traces_;
  std::shared_ptr<const DerivativeTable> table_;
  std::vector<double> up_, down_;
};

// Samples of dV/dp kept at most (doubles, 64 MiB); a longer run computes them as it goes.
constexpr std::size_t derivative_table_limit = std::size_t(8) << 20;

// One realisation: transition matrix P(m, n) and the direct <W> = sum_m p_m (<H_B>_m - E_m^A).
struct Realisation {
  Eigen::MatrixXd transitions;
  double direct_mean = 0;
  // the kept states' largest share of their norm in the outer 2% of the grid's momenta or points
  // over the run (BatchedSplitStep's measurement), averaged with the initial weights, as the
  // noiseless run's Diagnostics::momentum_edge and position_edge are (momentum_edge_tolerance)
  double edge = 0;
};

// Below this many substeps a run plans with FFTW_ESTIMATE, as run_work does (work.cpp).
constexpr int planning_substeps = 4096;

Realisation propagate_realisation(const PotentialPath& path, const WorkResult& w, int steps,
                                  const std::vector<double>& v_final, const WorkRequest& request) {
  const double tau = path.protocol().duration();
  const int kept = w.forward.transitions.initial_levels();
  Eigen::MatrixXcd psi = w.initial_spectrum.states.leftCols(kept).cast<std::complex<double>>();
  path.from_lab(psi, 0);
  const SplitOrder order = request.integrator == Integrator::strang ? SplitOrder::strang : SplitOrder::fourth;
  const int substeps = steps * (order == SplitOrder::fourth ? 3 : 1);
  SplitOperatorPropagator propagator(path, kept, order, 1,
                                     substeps < planning_substeps || request.repeatable_transforms
                                         ? FftPlanning::estimate
                                         : FftPlanning::measure);
  propagate(propagator, psi, 0.0, tau, steps, observe_every(finite_check_interval, NoObserver{}));
  path.to_lab(psi, tau);
  Realisation r;
  const Eigen::MatrixXcd amplitudes = project(w.final_spectrum, psi);
  r.transitions = transition_matrix(amplitudes).probability;
  const StateEnergies e = state_energies(path.grid(), v_final, psi);
  double weight = 0;
  for (int m = 0; m < kept; ++m) {
    const double p = w.forward.initial_weights[std::size_t(m)];
    r.direct_mean += p * (e.energy[m] - w.forward.initial_energies[m]);
    const auto j = std::size_t(m);
    r.edge += p * std::max(propagator.momentum_edge()[j], propagator.position_edge()[j]);
    weight += p;
  }
  if (weight > 0) r.edge /= weight;
  return r;
}

// Jackknife standard error of the values theta_r computed with realisation r left out.
double jackknife_error(const std::vector<double>& leave_one_out) {
  const double n = double(leave_one_out.size());
  double mean = 0;
  for (double v : leave_one_out) mean += v;
  mean /= n;
  double sum = 0;
  for (double v : leave_one_out) sum += (v - mean) * (v - mean);
  return std::sqrt((n - 1) / n * sum);
}

Estimate sample_mean(const std::vector<double>& values) {
  const double n = double(values.size());
  double mean = 0;
  for (double v : values) mean += v;
  mean /= n;
  double sum = 0;
  for (double v : values) sum += (v - mean) * (v - mean);
  return {mean, std::sqrt(sum / (n - 1) / n)};
}

std::string text(double v) {
  char buffer[32];
  std::snprintf(buffer, sizeof buffer, "%.3g", v);
  return buffer;
}

}  // namespace

namespace {

// The eigenbasis levels the Lindblad route would use on the run w (EigenbasisPropagator's
// basis in run_work: request.eigenbasis_levels, default twice the levels of its spectra).
int lindblad_levels(const WorkResult& w, const WorkRequest& request) {
  const int levels = int(w.final_spectrum.energies.size());
  return std::min<int>(request.eigenbasis_levels > 0 ? request.eigenbasis_levels : 2 * levels, int(w.grid.size()) / 2);
}

// ---- Lindblad route -------------------------------------------------------------------------
//
// Why gamma = S / 2. With H = H_0 + eps(t) D and white Gaussian eps, <eps(t) eps(t')> = c
// delta(t - t'), c = S/2 (one-sided PSD convention, noise.hpp), the noise average of the
// second-order Dyson term over a short interval h (time-ordered, i.e. Stratonovich: the delta
// at the end of the ordered integral counts one half) is
//   (-i)^2 int_0^h ds int_0^s ds' <eps(s) eps(s')> [D, [D, rho]] = -(c h / 2) [D, [D, rho]],
// odd orders average to zero and higher even orders are O(h^2) for Gaussian white noise, so
//   d rho/dt = -i [H_0, rho] - (c/2) [D, [D, rho]] = -i [H_0, rho] + gamma (D rho D - {D^2, rho}/2)
// with gamma = c = S/2 (the double commutator is 2 (D^2 rho + rho D^2)/2 - 2 D rho D; common
// practice, e.g. the averaged stochastic Liouville equation; with hbar: gamma = S / (2 hbar^2)).
// Check against the harmonic heating rate (noise.hpp): D = -w^2 x for centre noise gives
// d<H>/dt = -(gamma/2) <[D, [D, H]]> = gamma w^4 / 2 = w^4 S / 4, the rate of noise.hpp.
//
// The jump operators sqrt(gamma_p) D_p are Hermitian, so the map is unital (Lambda(1) = 1
// in the truncated basis) as well as trace preserving.

// The Lindblad route refused as hopeless for this noise (propagate_lindblad): with route = "auto"
// the realisations take over.
struct TooStiff : PhysicsError {
  using PhysicsError::PhysicsError;
};

struct LindbladRun {
  Eigen::MatrixXd transitions;                 // P(m, n), kept initial x final levels
  std::vector<double> energy, closed_energy;   // Tr(H_B rho_m), and for the unitary run (same basis)
  int basis = 0;
  long evaluations = 0;
};

// One master-equation run (header comment) for every kept initial level of w, and the same
// basis propagated without the dissipator (the reference of the extra energy, as runs[0] is
// for the realisations). Interaction picture from each restart t0 (as EigenbasisPropagator):
// rho = Q(s) o a, Q_kl = exp(-i (E_k - E_l) s), s = t - t0, and
//   da/dt = conj(Q) o (-i [M, rho] + sum_p (L_p rho L_p - {L_p^2, rho}/2)),  L_p = sqrt(gamma_p) D_p,
// with [M, rho] = X - X^dagger (X = M rho) and rho L^2 = (L^2 rho)^dagger for Hermitian rho.
// These shortcuts hold for Hermitian rho only: applied to an anti-Hermitian part A they give
// -(1/2)[L^2, A] - L A L, which grows A at rates up to gamma l^2 (l the eigenvalues of D),
// so the right-hand side takes the Hermitian part of the state first (measured: without it
// the rounding error grew to populations of +-50 in the top levels of a 96-level basis).
LindbladRun propagate_lindblad(const PotentialPath& path, const Potential& base, const Protocol& protocol,
                               const WorkResult& w, const std::vector<double>& v_final, const WorkRequest& request,
                               const NoiseRequest& noise, double bath_beta) {
  using Complex = std::complex<double>;
  const double tau = protocol.duration();
  const Grid& grid = w.grid;
  const std::vector<double> points = grid.points();
  // the eigenbasis integrator's basis (work.cpp, run_work_once: H_A's levels on the run's grid,
  // the potential capped as for its spectra) and reference potential
  const std::vector<double> v_a = protocol.initial(base).evaluate(points);
  std::vector<double> capped = v_a;
  cap_potential(capped, *std::min_element(capped.begin(), capped.end()), w.energy_cutoff);
  SpectrumOptions options = request.spectrum.options;
  options.levels = lindblad_levels(w, request);
  EigenbasisPropagator prop(path, solve_spectrum(grid, capped, options), v_a, request.ode, request.ode_arithmetic_limit);
  const Eigen::Index k = prop.basis_size();
  const int kept = w.forward.transitions.initial_levels();
  const Eigen::VectorXd& energy = prop.energies();
  // Memory, refused before it is allocated: the stacked density matrices (16 K^2 kept bytes),
  // four scratch stacks of the right-hand side and the Dormand-Prince stepper's ~10 copies of
  // the state (stages, error, the controlled step's trial): about 15 stacks.
  const double stack_bytes = 16.0 * double(k) * double(k) * kept;
  const double memory_limit =
      request.spectrum.options.memory_limit > 0 ? request.spectrum.options.memory_limit / 2 : 0x1.0p31;
  if (15 * stack_bytes > memory_limit)
    throw TooStiff("the master equation of " + std::to_string(kept) + (kept == 1 ? " kept level" : " kept levels") +
                   " in a basis of " +
                   std::to_string(k) + " levels needs about " + text(15 * stack_bytes / 1e9) + " GB, above " +
                   text(memory_limit / 1e9) + " GB: keep fewer initial levels (work.max_initial_levels) or use "
                   "noise.route = \"realisations\"");

  Eigen::MatrixXcd psi = w.initial_spectrum.states.leftCols(kept).cast<Complex>();
  path.from_lab(psi, 0);
  Eigen::MatrixXcd closed = prop.coefficients(psi);  // K x kept
  // stacked density matrices [rho_0 ... rho_kept-1], K x (K kept), rho_m = c_m c_m^dagger
  std::vector<double> y(std::size_t(2 * k * k * kept));
  Eigen::Map<Eigen::MatrixXcd> rho(reinterpret_cast<Complex*>(y.data()), k, k * kept);
  for (int m = 0; m < kept; ++m) rho.middleCols(m * k, k) = closed.col(m) * closed.col(m).adjoint();

  std::vector<double> gamma;
  for (const auto& s : noise.sources) gamma.push_back(s.spectrum.white_level() / 2);
  Eigen::MatrixXd coupling(k, k);
  std::vector<Eigen::MatrixXd> jump(noise.sources.size()), jump_squared(noise.sources.size());
  Eigen::MatrixXcd q(k, k), x(k, k * kept), l_rho(k, k * kept), l_rho_dagger(k, k * kept), product(k, k * kept);
  std::vector<double> lab(points.size()), derivative, up, down;
  LindbladRun run;
  auto jumps_at = [&](double t) {  // L_p = sqrt(gamma_p) D_p at time t (dV/dp at lab positions, noise.cpp)
    const double d = path.displacement(t);
    for (std::size_t j = 0; j < lab.size(); ++j) lab[j] = points[j] + d;
    const Potential at = protocol.at(base, t);
    for (std::size_t p = 0; p < jump.size(); ++p) {
      derivative.assign(lab.size(), 0.0);
      add_derivative(at, noise.sources[p].address, lab, std::sqrt(gamma[p]) * noise_scale(at, noise.sources[p]),
                     derivative, up, down);
      jump[p] = prop.project_function(Eigen::Map<const Eigen::VectorXd>(derivative.data(), Eigen::Index(derivative.size())));
      jump_squared[p].noalias() = jump[p] * jump[p];
    }
  };
  // The bath (BathRequest, noise.hpp): the instantaneous levels of H(t) = diag(E) + M(t) in the
  // basis (eigenvectors u), the rates g(j, n) from n to j between them and the total rate out of
  // each. The position's matrix in the basis: its off-diagonal elements, all the rates use, do
  // not depend on the origin of x (the frame's displacement).
  const bool bath = noise.bath.has_value();
  Eigen::MatrixXd position, hamiltonian(k, k), u(k, k), bath_rate(k, k);
  Eigen::VectorXd rate_out(k);
  Eigen::MatrixXcd uc(k, k), turned(k, k * kept), block(k, k);
  if (bath) position = prop.project_function(Eigen::Map<const Eigen::VectorXd>(points.data(), Eigen::Index(points.size())));
  // M(t) = 0 (a hold): the basis is the instantaneous eigenbasis (u = 1), the rates computed once
  bool bath_identity = false, bath_static = false;
  auto bath_at = [&](const Eigen::MatrixXd& m) {  // m = M(t)
    bath_identity = m.cwiseAbs().maxCoeff() == 0;
    if (bath_identity && bath_static) return;
    bath_static = bath_identity;
    hamiltonian = m;
    hamiltonian.diagonal() += energy;
    Eigen::VectorXd level = energy;
    if (bath_identity) {
      u.setIdentity();
    } else {
      const Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> solver(hamiltonian);
      u = solver.eigenvectors();
      level = solver.eigenvalues();
    }
    const Eigen::MatrixXd x = u.transpose() * position * u;
    const double x01 = x(0, 1) * x(0, 1);
    if (!(x01 > 1e-12 * x.cwiseAbs2().maxCoeff()))
      throw PhysicsError("bath: the position has no matrix element between the two lowest instantaneous levels "
                         "(|<0|x|1>|^2 = " + format_number(x01) + "), which sets the bath's rate; the bath needs a "
                         "trap whose lowest transition is dipole-allowed");
    const double gap = 1e-9 * (level[k - 1] - level[0]);
    for (Eigen::Index n = 0; n < k; ++n)
      for (Eigen::Index j = 0; j < k; ++j) {
        const double spacing = level[n] - level[j];  // > 0: down from n to j
        if (j == n || std::abs(spacing) <= gap) {
          bath_rate(j, n) = 0;
          continue;
        }
        const double occupation = std::isinf(bath_beta) ? 0.0 : 1 / std::expm1(bath_beta * std::abs(spacing));
        bath_rate(j, n) = noise.bath->rate * x(j, n) * x(j, n) / x01 * (spacing > 0 ? occupation + 1 : occupation);
      }
    rate_out = bath_rate.colwise().sum().transpose();
    uc = u.cast<Complex>();
  };
  // Refused before the run: noise that scatters a kept level more often during the protocol
  // than the basis has levels (sum_p <m|L_p^2|m> - <m|L_p|m>^2, the rate out of m, times tau)
  // cannot be held by the truncated basis, and makes the equation stiff (an hour for nothing).
  jumps_at(0.0);
  double scatterings = 0;
  for (int m = 0; m < kept; ++m) {
    double rate = 0;
    for (std::size_t p = 0; p < jump.size(); ++p) {
      const Eigen::VectorXcd c = closed.col(m);
      rate += (c.adjoint() * jump_squared[p].cast<Complex>() * c).value().real() -
              std::norm((c.adjoint() * jump[p].cast<Complex>() * c).value());
    }
    scatterings = std::max(scatterings, rate * tau);
  }
  if (scatterings > double(k))
    throw TooStiff("noise: a kept level would be scattered about " + format_number(scatterings) +
                       " times between levels during the protocol (gamma (<D^2> - <D>^2) tau), more than the " +
                       std::to_string(k) +
                       " levels of the eigenbasis can hold: the noise is too strong for a truncated basis (check "
                       "the PSD's unit and size; weaker noise, a shorter protocol or a larger final_margin)");
  // Refused before the run as well: an explicit Runge-Kutta step must stay below about 3.3 /
  // (gamma l_max^2) (l_max the largest |eigenvalue| of D_p in the basis: the dephasing rate of
  // the top levels), so the steps, and the arithmetic (about 8 (1 + 2 sources) K^3 per kept level
  // and evaluation, 6 evaluations a step), follow before any is taken. Above 1e12 operations
  // (some minutes) the realisations route is the practical one.
  double stiffness = 0;
  for (const auto& l : jump) {
    const Eigen::VectorXd eig = Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd>(l, Eigen::EigenvaluesOnly).eigenvalues();
    stiffness += std::max(eig.cwiseAbs2().maxCoeff(), 0.0) * tau;
  }
  if (bath) {  // the fastest decay, of the top level
    prop.coupling(0.0, coupling);
    bath_at(coupling);
    stiffness += rate_out.maxCoeff() * tau;
  }
  const double operations =
      6 * (stiffness / 3.3) * 8 * double(1 + 2 * jump.size() + (bath ? 4 : 0)) * double(k * k * k) * kept;
  if (operations > 1e12)
    throw TooStiff("noise: the Lindblad equation is stiff here (largest dephasing rate x duration " +
                       format_number(stiffness) + "): about " + format_number(operations) +
                       " operations, more than the 1e12 this route allows; use [noise] route = \"realisations\", "
                       "or check the PSD's unit and size");
  double t0 = 0;
  auto rhs = [&](const std::vector<double>& in, std::vector<double>& out, double t) {
    ++run.evaluations;
    const double s = t - t0;
    for (Eigen::Index c = 0; c < k; ++c)
      for (Eigen::Index r = 0; r < k; ++r) q(r, c) = std::polar(1.0, -(energy[r] - energy[c]) * s);
    Eigen::Map<const Eigen::MatrixXcd> a(reinterpret_cast<const Complex*>(in.data()), k, k * kept);
    Eigen::Map<Eigen::MatrixXcd> da(reinterpret_cast<Complex*>(out.data()), k, k * kept);
    Eigen::MatrixXcd& r = product;  // rho in the Schroedinger picture
    for (int m = 0; m < kept; ++m) {  // the Hermitian part (see above)
      auto block = r.middleCols(m * k, k);
      block = q.cwiseProduct(a.middleCols(m * k, k));
      block = 0.5 * (block + block.adjoint()).eval();
    }
    prop.coupling(t, coupling);
    jumps_at(t);
    x.noalias() = coupling * r;
    for (int m = 0; m < kept; ++m) {
      auto block = x.middleCols(m * k, k);
      da.middleCols(m * k, k) = Complex(0, -1) * (block - block.adjoint());
    }
    for (std::size_t p = 0; p < jump.size(); ++p) {
      l_rho.noalias() = jump[p] * r;
      for (int m = 0; m < kept; ++m) l_rho_dagger.middleCols(m * k, k) = l_rho.middleCols(m * k, k).adjoint();
      x.noalias() = jump[p] * l_rho_dagger;  // L rho L = L (L rho)^dagger
      da += x;
      x.noalias() = jump_squared[p] * r;  // L^2 rho; rho L^2 its adjoint
      for (int m = 0; m < kept; ++m) {
        auto block = x.middleCols(m * k, k);
        da.middleCols(m * k, k) -= 0.5 * (block + block.adjoint());
      }
    }
    if (bath) {  // in the instantaneous levels: rho' = u^T rho u, D' = gains on the diagonal - (G_k + G_l)/2 rho'_kl
      bath_at(coupling);
      if (!bath_identity) turned.noalias() = uc.adjoint() * r;
      for (int m = 0; m < kept; ++m) {
        if (bath_identity)
          block = r.middleCols(m * k, k);
        else
          block.noalias() = turned.middleCols(m * k, k) * uc;
        const Eigen::VectorXd population = block.diagonal().real();
        for (Eigen::Index c = 0; c < k; ++c)
          for (Eigen::Index l = 0; l < k; ++l) block(l, c) *= -0.5 * (rate_out[l] + rate_out[c]);
        block.diagonal() += (bath_rate * population).cast<Complex>();
        if (bath_identity)
          da.middleCols(m * k, k) += block;
        else
          da.middleCols(m * k, k).noalias() += uc * block * uc.adjoint();
      }
    }
    for (int m = 0; m < kept; ++m) da.middleCols(m * k, k) = q.conjugate().cwiseProduct(da.middleCols(m * k, k));
  };
  // restarts of the interaction picture: the eigenbasis integrator's observation steps
  const int restarts = request.integrator == Integrator::eigenbasis ? w.steps : 64;
  double hint = 0;
  for (int i = 0; i < restarts; ++i) {
    t0 = subdivision_time(0.0, tau, restarts, i);
    const double t1 = subdivision_time(0.0, tau, restarts, i + 1);
    integrate_controlled(rhs, y, t0, t1 - t0, request.ode, hint);
    for (Eigen::Index c = 0; c < k; ++c)
      for (Eigen::Index r = 0; r < k; ++r) q(r, c) = std::polar(1.0, -(energy[r] - energy[c]) * (t1 - t0));
    for (int m = 0; m < kept; ++m) rho.middleCols(m * k, k) = q.cwiseProduct(rho.middleCols(m * k, k));
    prop.step(closed, t0, t1 - t0);
    if (request.progress) request.progress(double(i + 1) / restarts);
  }
  // the basis states at tau in the lab frame: their amplitudes on H_B's levels (T, L x K) and
  // H_B between them (with the grid's kinetic operator, as state_energies)
  Eigen::MatrixXcd basis_states = prop.grid_states(Eigen::MatrixXcd::Identity(k, k));
  path.to_lab(basis_states, tau);
  const Eigen::MatrixXcd amplitudes = project(w.final_spectrum, basis_states);
  KineticOperator kinetic(grid, int(k));
  Eigen::MatrixXd h_re, h_im;
  apply_hamiltonian(kinetic, v_final, basis_states.real(), h_re);
  apply_hamiltonian(kinetic, v_final, basis_states.imag(), h_im);
  const Eigen::MatrixXcd h_b = basis_states.adjoint() * (h_re.cast<Complex>() + Complex(0, 1) * h_im.cast<Complex>()) *
                               grid.spacing();
  run.transitions.resize(kept, amplitudes.rows());
  for (int m = 0; m < kept; ++m) {
    const auto r = rho.middleCols(m * k, k);
    run.transitions.row(m) = (amplitudes * r).cwiseProduct(amplitudes.conjugate()).rowwise().sum().real().transpose();
    run.energy.push_back(h_b.transpose().cwiseProduct(r).sum().real());
    run.closed_energy.push_back((closed.col(m).adjoint() * h_b * closed.col(m)).value().real());
  }
  run.basis = int(k);
  return run;
}

}  // namespace

NoisyWorkResult run_noisy_work(const Potential& base, const Protocol& protocol, const WorkRequest& request,
                               const NoiseRequest& noise, const WorkResult* noiseless) {
  if (noise.sources.empty() && !noise.bath) throw InputError("noise", "", "at least one noise source or a bath");
  if (const auto& b = noise.bath) {
    if (!(b->rate > 0) || !std::isfinite(b->rate)) throw InputError("bath.rate", format_number(b->rate), "a rate > 0");
    if (b->mean_phonons < 0 && !(b->temperature >= 0 && std::isfinite(b->temperature)))
      throw InputError("bath.temperature", format_number(b->temperature), "a temperature >= 0");
    if (!std::isfinite(b->mean_phonons))
      throw InputError("bath.mean_phonons", format_number(b->mean_phonons), "a mean phonon number >= 0");
    if (noise.route == NoiseRoute::realisations)
      throw InputError("noise.route", "\"realisations\"",
                       "\"lindblad\" or \"auto\": damping toward a bath is a master equation (Lindblad route only)");
  }
  const Potential initial = protocol.initial(base);
  for (const auto& s : noise.sources) (void)initial.parameter(s.address);  // InputError for an unknown address
  if (!(protocol.duration() > 0))
    throw PhysicsError("noise needs a protocol of finite duration: a sudden switch (tau = 0) leaves no time for it");
  bool white = true;
  std::string coloured;
  for (const auto& s : noise.sources)
    if (!s.spectrum.is_white()) white = false, coloured = s.address;
  if (noise.bath && !white)
    throw InputError("bath", "a bath with the coloured noise on " + coloured,
                     "white noise only beside a bath: the bath needs the Lindblad route, which holds for white noise");
  if (noise.route == NoiseRoute::lindblad && !white)
    throw InputError("noise.route", "\"lindblad\"",
                     "\"realisations\" or \"auto\": the noise on " + coloured +
                         " has a PSD table (coloured), and the Lindblad route holds for white noise only");
  const bool eigenbasis = request.integrator == Integrator::eigenbasis;
  const std::string split_only = "noise realisations are propagated with the split-operator integrator: write "
                                 "integrator = \"order4\" or \"strang\"";
  if (eigenbasis && !noise.bath && (noise.route == NoiseRoute::realisations || !white))
    throw PhysicsError(split_only + (white ? " (or noise.route = \"lindblad\" for this white noise)"
                                           : " (the noise on " + coloured + " is coloured: realisations only)"));

  NoisyWorkResult out;
  out.noiseless = noiseless ? *noiseless : run_work(base, protocol, request);
  const WorkResult& w = out.noiseless;
  const double tau = protocol.duration();
  out.steps = w.steps;
  out.seed = noise.seed;
  out.psd_convention = noise_psd_convention();
  const PotentialPath path = w.co_moving ? PotentialPath::co_moving(w.grid, base, protocol)
                                         : PotentialPath::lab(w.grid, base, protocol);
  std::vector<double> lab(w.grid.points());
  for (double& x : lab) x += path.displacement(tau);
  const std::vector<double> v_final = protocol.final(base).evaluate(lab);
  const double nan = std::numeric_limits<double>::quiet_NaN();
  if (const auto h = initial.harmonic_part()) out.harmonic_omega = h->first;
  if (const auto& b = noise.bath) {
    // the co-moving frame of a trap that does not move (a constant centre) is the lab frame
    bool moves = false;
    for (int i = 0; i <= 256 && w.co_moving; ++i) moves = moves || path.displacement(tau * i / 256) != 0;
    if (moves)
      throw PhysicsError("bath: the levels it relaxes toward are those of the lab frame, and this run propagates in the "
                         "co-moving frame of the translation: write work.frame = \"lab\"");
    out.bath = true;
    out.bath_rate = b->rate;
    const Eigen::VectorXd& e = w.initial_spectrum.energies;
    out.bath_beta = b->mean_phonons >= 0
                        ? (b->mean_phonons == 0 ? std::numeric_limits<double>::infinity()
                                                : beta_from_phonons(b->mean_phonons, e.size() > 1 ? e[1] - e[0] : 0.0))
                        : (b->temperature > 0 ? 1 / b->temperature : std::numeric_limits<double>::infinity());
  }

  // the route
  const int basis_levels = lindblad_levels(w, request);
  bool lindblad = noise.route == NoiseRoute::lindblad;
  if (noise.route == NoiseRoute::lindblad)
    out.route_reason = "asked for (noise.route = \"lindblad\")";
  else if (noise.route == NoiseRoute::realisations)
    out.route_reason = "asked for (noise.route = \"realisations\")";
  else if (noise.bath) {
    lindblad = true;
    out.route_reason = "automatic: damping toward a bath is a master equation, the Lindblad route (basis of " +
                       std::to_string(basis_levels) + " levels)";
  }
  else if (!white)
    out.route_reason = "automatic: the noise on " + coloured + " is coloured (a PSD table), which needs realisations";
  else if (basis_levels > lindblad_basis_limit)
    out.route_reason = "automatic: all noise is white, but the eigenbasis of " + std::to_string(basis_levels) +
                       " levels is above " + std::to_string(lindblad_basis_limit) +
                       " (the master equation costs ~K^3 per level): realisations";
  else {
    lindblad = true;
    out.route_reason = "automatic: all noise is white, so its exact average, the Lindblad equation, applies (basis of " +
                       std::to_string(basis_levels) + " levels)";
  }
  if (!lindblad && eigenbasis) throw PhysicsError(split_only + " (" + out.route_reason + ")");

  std::optional<LindbladRun> solved;
  if (lindblad) {
    try {
      solved = propagate_lindblad(path, base, protocol, w, v_final, request, noise, out.bath_beta);
    } catch (const TooStiff& e) {
      if (noise.route == NoiseRoute::lindblad || eigenbasis || noise.bath) throw;
      lindblad = false;
      out.route_reason = "automatic: all noise is white, but the Lindblad route is refused (" + std::string(e.what()) +
                         "): realisations";
    }
  }
  OdeTolerances used_ode = request.ode;
  if (lindblad && noise.line_error_target > 0) {
    // A line error asked for (--tolerance): the run is repeated on a basis of 3/2 the levels
    // with ODE tolerances ten times tighter; the finer run is kept and its distance to the
    // coarser (line_distance, the form of --tolerance) is its error estimate, as the
    // --tolerance search does for the grid (an over-estimate where the error falls fast).
    WorkRequest finer = request;
    finer.eigenbasis_levels = std::min<int>((3 * solved->basis + 1) / 2, int(w.grid.size()) / 2);
    finer.ode.absolute /= 10;
    finer.ode.relative /= 10;
    out.line_error_target = noise.line_error_target;
    try {
      LindbladRun check = propagate_lindblad(path, base, protocol, w, v_final, finer, noise, out.bath_beta);
      WorkInput a = w.forward, b = w.forward;
      a.transitions.probability = solved->transitions;
      b.transitions.probability = check.transitions;
      out.line_error_total = line_distance(a, b).distance;
      check.evaluations += solved->evaluations;
      out.realisation_choice = "basis " + std::to_string(solved->basis) + " -> " + std::to_string(check.basis) +
                               " levels, ODE tolerances / 10: line distance " + text(out.line_error_total) +
                               (check.basis == solved->basis ? " (the grid allows no larger basis: ODE only)" : "");
      solved = std::move(check);
      used_ode = finer.ode;
    } catch (const TooStiff& e) {
      out.line_error_total = nan;
      out.realisation_choice = std::string("not checked: the finer master equation is refused (") + e.what() + ")";
    }
    out.targets_met = out.line_error_total <= noise.line_error_target;
    if (!out.targets_met)
      out.warnings.push_back("the Lindblad route's truncation and ODE error is not shown below the tolerance " +
                             text(noise.line_error_target) + ": " + out.realisation_choice +
                             "; raise work.final_margin or the eigenbasis levels, or tighten the ODE tolerances");
  }
  if (lindblad) {
    const LindbladRun& run = *solved;
    out.route_name = "lindblad";
    out.basis_levels = run.basis;
    out.ode_evaluations = run.evaluations;
    out.route = std::string("lindblad: master equation with ") +
                (noise.sources.empty() ? "" : "jump operators sqrt(S/2) dV/dp ") +
                (noise.bath ? std::string(noise.sources.empty() ? "" : "and ") +
                                  "thermalising jumps between the instantaneous levels (bath) "
                            : "") +
                "in the eigenbasis of " + std::to_string(run.basis) + " levels of H_A (Dormand-Prince 5(4), tolerances " +
                text(used_ode.absolute) + " absolute, " + text(used_ode.relative) +
                " relative); deterministic, no statistical error";
    WorkInput input = w.forward;
    input.transitions.probability = run.transitions;
    out.transitions = input.transitions;
    out.distribution = work_distribution(input, request.merge_tolerance);
    out.line_error.assign(out.distribution.lines.size(), 0.0);
    out.mean = {out.distribution.mean, 0};
    out.variance = {out.distribution.variance, 0};
    out.jarzynski = w.forward.beta ? Estimate{out.distribution.jarzynski_average, 0} : Estimate{nan, nan};
    double direct = 0, closed = 0;
    for (int m = 0; m < int(run.energy.size()); ++m) {
      const double p = w.forward.initial_weights[std::size_t(m)];
      direct += p * (run.energy[std::size_t(m)] - w.forward.initial_energies[m]);
      closed += p * (run.closed_energy[std::size_t(m)] - w.forward.initial_energies[m]);
    }
    out.direct_mean = {direct, 0};
    out.extra_energy = {direct - closed, 0};
    out.heating_rate = {out.extra_energy.value / tau, 0};
    out.heating_quanta_rate = out.harmonic_omega > 0 ? Estimate{out.heating_rate.value / out.harmonic_omega, 0}
                                                     : Estimate{nan, nan};
    if (noise.mean_error_target > 0)
      out.notes.push_back("noise.standard_error does not apply to the Lindblad route: the master equation is the exact "
                          "average, with no statistical error (its numerical error is checked with --tolerance)");
    if (out.distribution.unresolved_weight > request.unresolved_tolerance)
      out.warnings.push_back("with noise the unresolved final weight is " + text(out.distribution.unresolved_weight) +
                             " (above " + text(request.unresolved_tolerance) +
                             "): the noise heats beyond the final levels kept; raise final_margin");
    return out;
  }

  if (noise.realisations < 2)
    throw InputError("noise_run.realisations", std::to_string(noise.realisations),
                     "at least 2 realisations (the standard errors need two)");
  const bool targeted = noise.mean_error_target > 0 || noise.line_error_target > 0;
  if (targeted && noise.max_realisations < noise.realisations)
    throw InputError("noise.max_realisations", std::to_string(noise.max_realisations),
                     "at least realisations (" + std::to_string(noise.realisations) + ")");
  out.route_name = "realisations";
  // The noise's steps: the noiseless run's step suits the noiseless motion (a held trap needs
  // hardly any), not the excitation the noise drives at the transition frequencies of its levels
  // (f and 2 f of a harmonic trap). At least 10 steps per period of twice the largest spacing of
  // the levels kept: measured on a held 1 MHz trap with white centre noise (order 4), 60 steps in
  // 10 us (0.33 of a 2 MHz period per step) gave 70 % of the heating, 120 and 240 steps the exact
  // rate within their 5 % errors.
  double widest = 0;
  for (int k = 0; k < 2; ++k) {
    const Eigen::VectorXd& e = k == 0 ? w.forward.initial_energies : w.forward.final_energies;
    const Eigen::Index levels =
        k == 0 ? w.forward.transitions.initial_levels() : w.forward.transitions.final_levels();
    for (Eigen::Index n = 0; n + 1 < levels && n + 1 < e.size(); ++n) widest = std::max(widest, e[n + 1] - e[n]);
  }
  const double highest = 2 * widest / (2 * si::pi);  // cycles per internal time unit
  const int steps = std::max(w.steps, int(std::min(1e8, std::ceil(tau * highest / 0.1))));
  if (steps > w.steps)
    out.notes.push_back("the noise realisations run with " + std::to_string(steps) + " steps, not the noiseless run's " +
                        std::to_string(w.steps) + ": 10 per period of twice the largest level spacing kept, "
                        "which the noise drives");
  out.steps = steps;
  out.mean_error_target = noise.mean_error_target;
  out.line_error_target = noise.line_error_target;

  // the transition matrix of every realisation is kept (the jackknife of var W and of the
  // Jarzynski average needs them): refuse a run whose matrices would not fit, and grow a
  // targeted run no further than they fit
  const double matrix_bytes =
      double(w.forward.transitions.initial_levels()) * double(w.forward.transitions.final_levels()) * sizeof(double);
  const double limit = request.spectrum.options.memory_limit > 0 ? request.spectrum.options.memory_limit / 2 : 0x1.0p31;
  const auto fitting = [&](int realisations) { return double(realisations + 1) * matrix_bytes <= limit; };
  if (!fitting(noise.realisations))
    throw PhysicsError("noise: " + std::to_string(noise.realisations) + " realisations of " +
                       std::to_string(w.forward.transitions.initial_levels()) + " x " +
                       std::to_string(w.forward.transitions.final_levels()) + " transition matrices need " +
                       text(double(noise.realisations + 1) * matrix_bytes / 1e9) + " GB, above " + text(limit / 1e9) +
                       " GB: lower the realisations (the standard errors scale as 1/sqrt(realisations))");
  int memory_cap = int(std::min(1e9, std::floor(limit / matrix_bytes) - 1));
  if (targeted && noise.sharing.shared()) {  // the processes' memories differ: all grow to the least cap
    const std::size_t processes = std::size_t(noise.sharing.processes);
    for (const auto& c : shared_parts(noise.sharing, 0, processes, 1, [&](std::size_t) {
           return std::vector<double>{double(memory_cap)};
         }))
      memory_cap = std::min(memory_cap, int(c[0]));
  }
  const int cap = targeted ? std::min(noise.max_realisations, memory_cap) : noise.realisations;
  // runs[0] is the noiseless baseline through the same code (the reference of the extra
  // energy), recording the times the potential is sampled at; runs[1 .. R] the noisy ones
  std::vector<Realisation> runs(1);
  auto times = std::make_shared<std::vector<double>>();
  runs[0] = propagate_realisation(
      path.with_perturbation([times](double t, const std::vector<double>&, std::vector<double>&) { times->push_back(t); }),
      w, steps, v_final, request);
  std::sort(times->begin(), times->end());
  times->erase(std::unique(times->begin(), times->end()), times->end());
  std::shared_ptr<DerivativeTable> table;
  if (times->size() * w.grid.size() * noise.sources.size() <= derivative_table_limit) {
    table = std::make_shared<DerivativeTable>();
    const std::vector<double> points = w.grid.points();
    std::vector<double> x(points.size()), up, down;
    for (double t : *times) {
      const double d = path.displacement(t);
      for (std::size_t j = 0; j < x.size(); ++j) x[j] = points[j] + d;  // as PotentialPath::sample
      const Potential at = protocol.at(base, t);
      table->row.emplace(t, table->values.size());
      for (const auto& source : noise.sources) {
        table->values.emplace_back(x.size(), 0.0);
        add_derivative(at, source.address, x, noise_scale(at, source), table->values.back(), up, down);
      }
    }
  }
  auto run_one = [&](int index) {
    std::vector<NoiseTrace> traces;
    for (std::size_t k = 0; k < noise.sources.size(); ++k)
      traces.push_back(noise_trace(noise.sources[k].spectrum, tau, steps, noise.seed, std::uint64_t(index - 1), k));
    const PotentialPath noisy =
        path.with_perturbation(ParameterNoise(base, protocol, noise.sources, std::move(traces), table));
    runs[std::size_t(index)] = propagate_realisation(noisy, w, steps, v_final, request);
  };
  // realisations first .. last - 1 of this process, spread over its threads
  auto compute_batch = [&](int first, int last) {
    std::atomic<int> next{first};
    std::exception_ptr failure;
    std::mutex failure_mutex;
    auto worker = [&] {
      for (int i; (i = next++) < last;) {
        if (!noise.sharing.mine(std::size_t(i - 1))) continue;  // another process's realisation
        try {
          run_one(i);
        } catch (...) {
          std::lock_guard lock(failure_mutex);
          if (!failure) failure = std::current_exception();
          next = last;
        }
      }
    };
    const int threads = std::max(1, std::min(request.threads, last - first));
    std::vector<std::thread> pool;
    for (int t = 1; t < threads; ++t) {
      try {
        pool.emplace_back(worker);
      } catch (const std::system_error&) {
        break;  // fewer workers: the same results, more time
      }
    }
    worker();
    for (auto& t : pool) t.join();
    if (failure) std::rethrow_exception(failure);
  };
  // realisations first .. last - 1, spread over the threads (of this process: its share)
  const Eigen::Index rows = w.forward.transitions.initial_levels(), cols = w.forward.transitions.final_levels();
  // a realisation as a part: P(m, n), then the direct <W> and the edge
  const std::size_t width = std::size_t(rows * cols) + 2;
  auto run_batch = [&](int first, int last) {
    runs.resize(std::size_t(last));
    std::vector<std::vector<double>> parts(std::size_t(last - first));
    exchange_parts(noise.sharing, parts, std::size_t(first - 1), width, [&] {
      compute_batch(first, last);
      if (!noise.sharing.shared()) return;
      for (int i = first; i < last; ++i)
        if (noise.sharing.mine(std::size_t(i - 1))) {
          const Realisation& r = runs[std::size_t(i)];
          std::vector<double>& part = parts[std::size_t(i - first)];
          part.assign(r.transitions.data(), r.transitions.data() + r.transitions.size());
          part.push_back(r.direct_mean);
          part.push_back(r.edge);
        }
    });
    if (!noise.sharing.shared()) return;
    for (int i = first; i < last; ++i)
      if (!noise.sharing.mine(std::size_t(i - 1))) {
        const std::vector<double>& part = parts[std::size_t(i - first)];
        runs[std::size_t(i)].transitions = Eigen::Map<const Eigen::MatrixXd>(part.data(), rows, cols);
        runs[std::size_t(i)].direct_mean = part[std::size_t(rows * cols)];
        runs[std::size_t(i)].edge = part.back();
      }
  };

  // averages and their errors over runs[1 .. R]
  auto summarise = [&](int R) {
    Eigen::MatrixXd sum = Eigen::MatrixXd::Zero(runs[1].transitions.rows(), runs[1].transitions.cols());
    for (int r = 1; r <= R; ++r) sum += runs[std::size_t(r)].transitions;
    WorkInput input = w.forward;
    input.transitions.probability = sum / R;
    out.transitions = input.transitions;
    out.distribution = work_distribution(input, request.merge_tolerance);
    const std::size_t lines = out.distribution.lines.size();
    std::vector<std::vector<double>> line_loo(lines, std::vector<double>(std::size_t(R)));
    const std::size_t count = std::size_t(R);
    std::vector<double> mean_loo(count), variance_loo(count), jarzynski_loo(count);
    for (int r = 1; r <= R; ++r) {
      input.transitions.probability = (sum - runs[std::size_t(r)].transitions) / (R - 1);
      const WorkDistribution d = work_distribution(input, request.merge_tolerance);
      TRAPWORK_EXPECT(d.lines.size() == lines, "run_noisy_work: the line structure depends on energies only");
      for (std::size_t l = 0; l < lines; ++l) line_loo[l][std::size_t(r - 1)] = d.lines[l].probability;
      mean_loo[std::size_t(r - 1)] = d.mean;
      variance_loo[std::size_t(r - 1)] = d.variance;
      jarzynski_loo[std::size_t(r - 1)] = d.jarzynski_average;
    }
    out.line_error.clear();
    out.line_error_total = 0;
    for (std::size_t l = 0; l < lines; ++l) {
      out.line_error.push_back(jackknife_error(line_loo[l]));
      out.line_error_total += 0.5 * out.line_error.back();
    }
    out.mean = {out.distribution.mean, jackknife_error(mean_loo)};
    out.variance = {out.distribution.variance, jackknife_error(variance_loo)};
    out.jarzynski = w.forward.beta ? Estimate{out.distribution.jarzynski_average, jackknife_error(jarzynski_loo)}
                                   : Estimate{nan, nan};
  };
  // the factor by which R must grow for every target (errors fall as 1/sqrt(R)); <= 1: met
  auto growth = [&] {
    double f = 0;
    if (noise.mean_error_target > 0) f = std::max(f, std::pow(out.mean.error / noise.mean_error_target, 2));
    if (noise.line_error_target > 0) f = std::max(f, std::pow(out.line_error_total / noise.line_error_target, 2));
    return f;
  };

  int R = noise.realisations, batches = 1;
  run_batch(1, R + 1);
  summarise(R);
  // Grow: 1.2 times the predicted R (the error estimate of a small run scatters), at least a
  // quarter more, at most the cap; 20 batches bound the loop where the errors do not fall.
  for (double f = growth(); targeted && f > 1 && R < cap && batches < 20; f = growth()) {
    const double wanted = std::max(1.2 * f * R, 1.25 * R + 1);
    const int next = int(std::min(double(cap), std::ceil(wanted)));
    run_batch(R + 1, next + 1);
    R = next;
    ++batches;
    summarise(R);
  }
  out.realisations = R;
  out.route = "realisations: " + std::to_string(R) + " noise traces, each propagated by the " + w.method;
  std::string targets;
  if (noise.mean_error_target > 0) targets += "the standard error of <W> asked for";
  if (noise.line_error_target > 0) targets += std::string(targets.empty() ? "" : " and ") + "the line error asked for";
  if (!targeted) {
    out.realisation_choice = "as given (noise.realisations)";
  } else {
    out.targets_met = growth() <= 1;
    out.realisation_choice = "grown in " + std::to_string(batches) + (batches == 1 ? " batch" : " batches") +
                             " for " + targets + (out.targets_met ? " (met)" : " (NOT met)");
    if (!out.targets_met) {
      const std::string stop = R >= cap ? (cap == noise.max_realisations
                                               ? "noise.max_realisations = " + std::to_string(cap)
                                               : "the memory of the transition matrices (" + std::to_string(cap) +
                                                     " realisations)")
                                        : "20 batches";
      // relative to the targets: the library knows no display unit
      std::string reached;
      if (noise.mean_error_target > 0)
        reached += "the standard error of <W> is " + text(out.mean.error / noise.mean_error_target) + " times";
      if (noise.line_error_target > 0)
        reached += std::string(reached.empty() ? "" : ", ") + "the line error " + text(out.line_error_total) +
                   " is " + text(out.line_error_total / noise.line_error_target) + " times";
      out.warnings.push_back("the requested statistical error is not reached: after " + std::to_string(R) +
                             " realisations (stopped by " + stop + ") " + reached +
                             " the one asked for; about " + text(std::ceil(growth() * R)) +
                             " realisations would reach it");
    }
  }
  for (int r = 1; r <= R; ++r) out.realisation_direct_mean.push_back(runs[std::size_t(r)].direct_mean);
  out.direct_mean = sample_mean(out.realisation_direct_mean);
  out.extra_energy = {out.direct_mean.value - runs[0].direct_mean, out.direct_mean.error};
  out.heating_rate = {out.extra_energy.value / tau, out.extra_energy.error / tau};
  out.heating_quanta_rate = out.harmonic_omega > 0 ? Estimate{out.heating_rate.value / out.harmonic_omega,
                                                               out.heating_rate.error / out.harmonic_omega}
                                                   : Estimate{nan, nan};
  // Noise strong enough to drive the states to the grid's momentum or position limit heats
  // beyond what the grid holds: the extra energy then saturates at a grid-made value (a finding:
  // 3.1e6 quanta/s +- 1 % printed for 1 m^2/Hz of centre noise, whose rate is 3.9e28).
  double edge = 0;
  for (int r = 1; r <= R; ++r) edge = std::max(edge, runs[std::size_t(r)].edge);
  out.noisy_edge = edge;
  if (edge > momentum_edge_tolerance)
    out.warnings.push_back("the noisy states reach the grid's momentum or position limit (weight " + text(edge) +
                           " in its outer 2%, above " + text(momentum_edge_tolerance) +
                           "): the extra energy and the lines are limited by the grid, not by the noise, and are "
                           "not to be trusted; give the grid more points and extent ([grid] points, left, right) or "
                           "check the noise level and its unit");
  // Probability beyond the final levels matters only where the realisations resolve it: below a
  // tenth of their statistical line error it changes no line beyond that error (the extra energy
  // and the direct <W> count all levels anyway).
  const double resolved = std::max(request.unresolved_tolerance, 0.1 * out.line_error_total);
  if (out.distribution.unresolved_weight > resolved)
    out.warnings.push_back("with noise the unresolved final weight is " + text(out.distribution.unresolved_weight) +
                           " (above " + text(resolved) +
                           ", the larger of the tolerance and a tenth of the statistical line error): the noise "
                           "heats beyond the final levels kept; raise final_margin");
  return out;
}

}  // namespace trapwork
