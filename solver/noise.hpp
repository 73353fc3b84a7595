#pragma once
// Technical noise on named parameters of the potential during a protocol: the realisations
// route and the Lindblad route of white noise (design: DEVELOPERS.md, "Noise during the
// protocol").
//
// Model: H(t) = H_0(t) + sum_p eps_p(t) dH/dp(t), p a parameter address ("trap.centre",
// "trap.frequency", "tweezer.depth", a formula parameter), dH/dp = dV/dp(x; parameters at t)
// by a central difference of the potential in p (step h = 1e-4 max(|p|, 1), or 1e-4 |p| for a
// positive parameter below 1e-4: error O(h^2 d^3V/dp^3), exact for V quadratic in p such as
// the centre and frequency of a harmonic term). The noises of different parameters are
// independent, stationary and Gaussian.
//
// PSD convention: one-sided, per ordinary frequency f (cycles per unit time), so that
//   integral_0^inf S(f) df = <eps^2>,   and white noise S(f) = S has <eps(t) eps(t')> = (S/2) delta(t - t').
// Internal units (solver/units.hpp): f in cycles per T0, S in (parameter unit)^2 T0.
//
// Heating of a harmonic trap (omega, m = hbar = 1 inside) from the golden rule, or from the
// Lindblad equation of white noise (derivations in tests/test_noise.cpp):
//   position noise on the centre  d<E>/dt = omega^4 S_x(f_trap) / 4, i.e. dn/dt = omega^3 S_x / 4
//   (= S_F/(4 m hbar omega) with the force PSD S_F = m^2 omega^4 S_x; Turchette et al.,
//   Phys. Rev. A 61, 063418 (2000), for the electric-field form; Savard, O'Hara and Thomas,
//   Phys. Rev. A 56, R1095 (1997) write (pi/2) m omega^4 S_x(omega) with S per angular
//   frequency, the same rate; from memory);
//   spring-constant noise k(1 + eps)  d<E>/dt = Gamma <E>, Gamma = pi^2 f_trap^2 S_eps(2 f_trap)
//   (Savard et al., same paper, from memory, with S per ordinary frequency).
//
// Realisations: each realisation draws one trace per noise from the PSD on the protocol's
// time grid and propagates the kept initial states (one batch) with the split-operator
// propagator of the noiseless run, on its grid and frame; the TPM transition matrices are
// averaged. Every trace is a closed (unitary) evolution.
#include <cstdint>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "solver/sharing.hpp"
#include "solver/work.hpp"

namespace trapwork {

// A one-sided power spectral density (PSD convention above).
class NoiseSpectrum {
 public:
  // S(f) = level for all f >= 0; level >= 0 and finite.
  static NoiseSpectrum white(double level);
  // Linear interpolation through (frequency_i, density_i); 0 outside [frequency_0,
  // frequency_last]. Frequencies >= 0 strictly increasing, densities >= 0, all finite, >= 2
  // rows. Throws InputError (key "noise") otherwise.
  static NoiseSpectrum table(std::vector<double> frequency, std::vector<double> density);
  double operator()(double frequency) const;
  bool is_white() const { return frequency_.empty(); }
  double white_level() const { return level_; }
  const std::vector<double>& frequencies() const { return frequency_; }
  const std::vector<double>& densities() const { return density_; }

 private:
  double level_ = 0;
  std::vector<double> frequency_, density_;
};

// The centre-position PSD that heats a harmonic trap of angular frequency omega by
// `quanta_per_time` quanta per unit time (internal units, m = hbar = 1):
//   S_x = 4 (dn/dt) / omega^3   (inverse of dn/dt = omega^3 S_x / 4 above).
double position_psd_from_heating_rate(double quanta_per_time, double omega);
// The inverse: quanta per unit time from a centre-position PSD at omega.
double heating_rate_from_position_psd(double psd, double omega);

// Noise on one parameter of the potential.
struct NoiseSource {
  std::string address;  // "trap.centre"
  NoiseSpectrum spectrum = NoiseSpectrum::white(0);
  // Relative (fractional) noise, e.g. intensity noise given as RIN: the spectrum is that of
  // eps/p (per unit time, no parameter unit) and the noise term is p(t) eps_rel(t) dV/dp, with
  // p(t) the parameter's value at each time of the protocol (ramped or not); i.e. the absolute
  // PSD is S_p(f, t) = S_rel(f) p(t)^2. For a constant p identical to the absolute source of
  // level S_rel p^2.
  bool relative = false;
};

// Damping toward a thermal bath (Lindblad route only): jump operators between the
// instantaneous eigenstates |k(t)> of the frame's Hamiltonian in the truncated basis,
//   L_{n->k} = sqrt(g_{n->k}) |k(t)><n(t)|,  for E_n > E_k (w = E_n - E_k):
//   g_{n->k} = rate |x_kn|^2 / |x_01|^2 (N(w) + 1),  g_{k->n} = rate |x_kn|^2 / |x_01|^2 N(w),
//   N(w) = 1 / (exp(beta_bath w) - 1) (0 for a bath at zero temperature),
// x_kn = <k(t)|x|n(t)> and x_01 that of the two lowest instantaneous levels. Detailed balance
// g_{k->n} / g_{n->k} = exp(-beta_bath w) holds for every pair, so a held Hamiltonian relaxes to
// the Gibbs state at the bath temperature. For a harmonic trap |x_{n-1,n}|^2 / |x_01|^2 = n and
// the populations follow the rate equations of the standard damped-oscillator master equation
//   d rho/dt = gamma (N + 1) (a rho a^+ - {a^+ a, rho}/2) + gamma N (a^+ rho a - {a a^+, rho}/2)
// (Breuer and Petruccione, The Theory of Open Quantum Systems (2002), section 3.4.6, from
// memory), so d<n>/dt = -rate (<n> - N(omega)): `rate` is the energy damping rate gamma, and in
// any trap the decay rate of the first excited level into the ground level at zero temperature.
// One jump per pair of levels is the secular (Davies) form for distinct Bohr frequencies: the
// coherences between levels decay at half the sum of their total rates out, without the
// transfer of coherence along the ladder that the harmonic form has (populations identical).
// Pairs closer than 1e-9 of the basis' energy range (degenerate levels) are not coupled.
struct BathRequest {
  double temperature = 0;    // k_B T_bath (internal energy), >= 0; used when mean_phonons < 0
  double mean_phonons = -1;  // >= 0: the bath given by its mean occupation N at H_A's lowest spacing
  double rate = 0;           // gamma > 0, per internal time
};

// How the noise is averaged: noise traces propagated one by one (any PSD), or the Lindblad
// master equation of white noise (white PSDs only); automatic: Lindblad when every source is
// white and its basis fits (lindblad_basis_limit), realisations otherwise.
enum class NoiseRoute { automatic, realisations, lindblad };

struct NoiseRequest {
  std::vector<NoiseSource> sources;
  int realisations = 100;   // >= 2 (the standard errors need two); realisations route only
  std::uint64_t seed = 1;   // traces depend on (seed, realisation, source index) only
  NoiseRoute route = NoiseRoute::automatic;
  // Realisations chosen for a requested statistical error (realisations route; 0: no target).
  // `realisations` is then the first batch; more are run in batches (the next size from the
  // errors so far, which fall as 1/sqrt(R)) until every target is met or max_realisations
  // (or the memory of the transition matrices) stops it, with a warning giving the errors
  // reached. Realisation r is the same trace in every batch, so a grown run is a longer run.
  double mean_error_target = 0;  // standard error of <W> (internal energy)
  double line_error_target = 0;  // statistical line error (NoisyWorkResult::line_error_total)
  int max_realisations = 10000;  // >= realisations
  // Damping toward a bath (Lindblad route only; sources may then be empty).
  std::optional<BathRequest> bath;
  // Realisations route: the realisations shared among processes (solver/sharing.hpp; part i is
  // realisation i + 1, so process k of P runs realisations k + 1, k + 1 + P, ...). Every process
  // runs run_noisy_work with the same inputs and ends with the same result, bit for bit that of
  // one process. Default: one process.
  PartSharing sharing;
};

// The largest eigenbasis (levels K) the automatic choice takes the Lindblad route with: its
// density matrices cost ~16 K^3 operations per kept level and right-hand side, against one
// split-operator run per realisation (at K = 240 and 10 kept levels, ~2e9 per evaluation).
constexpr int lindblad_basis_limit = 240;

// A noise trace eps(t) on the nodes t_i = i tau/N, i = 0..N, linearly interpolated between
// them (the end segments continued slightly beyond [0, tau], where the fourth-order
// composition samples).
struct NoiseTrace {
  double tau = 0;
  std::vector<double> values;  // N + 1 node values
  double operator()(double t) const;
};

// Draws a trace: N(0, 1) samples on M >= 2N nodes (M a fast FFT size: the trace is one
// period of a circulant process, so its start and end are not correlated through the
// wrap-around), filtered in frequency space with the gain sqrt(S(f_k) / (2 dt)) at
// f_k = k / (M dt) (real FFT, FFTW), the first N + 1 nodes kept. For white S this is i.i.d.
// nodes of variance S / (2 dt); in general the nodes have the PSD S(f) at the frequencies of
// the long period (resolution 1/(M dt) <= 1/(2 tau)), with nothing above the node Nyquist
// frequency 1/(2 dt). Gaussian amplitudes, not random phases with fixed amplitudes: a sum of
// fixed-amplitude sinusoids is not Gaussian and understates the scatter between realisations.
// The random numbers: std::mt19937_64 from std::seed_seq{seed low/high words, realisation,
// source}, Gaussian by Box-Muller on 53-bit uniforms written out here, so that a trace is the
// same with any standard library.
NoiseTrace noise_trace(const NoiseSpectrum& spectrum, double tau, int intervals, std::uint64_t seed,
                       std::uint64_t realisation, std::uint64_t source);

// A quantity averaged over realisations with its standard error (jackknife over the
// realisations: for averages of one realisation's values it is the usual sd / sqrt(R); for
// the variance and the Jarzynski average, functions of the averaged transition matrix, the
// leave-one-out estimate, Efron and Stein, Ann. Stat. 9, 586 (1981), common practice).
struct Estimate {
  double value = 0;
  double error = 0;  // standard error
};

struct NoisyWorkResult {
  WorkResult noiseless;            // run_work without noise: grid, frame, steps, spectra
  TransitionMatrix transitions;    // P(m -> n) with noise (averaged over the realisations)
  WorkDistribution distribution;   // from the transition matrix averaged over the realisations
  std::vector<double> line_error;  // standard error of each line probability (same order)
  Estimate mean, variance;         // <W>, var W of the noisy distribution
  Estimate jarzynski;              // <exp(-beta W)> (Gibbs initial state; NaN otherwise)
  Estimate direct_mean;            // <W> from <psi_m|H_B|psi_m> - E_m^A (no final-level sum)
  Estimate extra_energy;           // direct <W> with noise minus without: energy the noise added
  Estimate heating_rate;           // extra_energy / tau (energy per time)
  double harmonic_omega = 0;       // the initial potential's harmonic frequency (0: none)
  Estimate heating_quanta_rate;    // heating_rate / omega_h (quanta per time; NaN without omega_h)
  std::vector<double> realisation_direct_mean;  // direct <W> of each realisation
  int realisations = 0;
  // Half the sum of the line standard errors: the statistical error of P(W) in the total-
  // variation form of --tolerance (line_distance, work.hpp; an upper estimate: the expected
  // |error| of a Gaussian line is 0.8 of its standard error). 0 on the Lindblad route.
  double line_error_total = 0;
  double mean_error_target = 0, line_error_target = 0;  // as requested (0: none)
  bool targets_met = true;         // every requested target met (true without targets)
  std::string realisation_choice;  // how R came about ("as given", "grown in 3 batches ...")
  std::uint64_t seed = 0;
  int steps = 0;                   // the protocol's time steps = trace intervals
  // realisations: the largest weight (times its initial weight) of a noisy state in the outer 2%
  // of the grid's momenta or points over the run; warned above momentum_edge_tolerance. NaN on
  // the Lindblad route (its basis truncation is the unresolved weight instead)
  double noisy_edge = std::numeric_limits<double>::quiet_NaN();
  std::string route;               // "realisations: ..." or "lindblad: ..." (what ran, in words)
  std::string route_name;          // "realisations" or "lindblad"
  std::string route_reason;        // why this route ran
  int basis_levels = 0;            // Lindblad: levels of its eigenbasis (0: realisations)
  long ode_evaluations = 0;        // Lindblad: right-hand-side evaluations of the master equation
  std::string psd_convention;      // the sentence for the summary
  // With a bath: the lines are energy changes E_n^B - E_m^A (work + heat), not work, and the
  // Jarzynski average is not expected to equal Z_B/Z_A.
  bool bath = false;
  double bath_beta = 0;            // 1 / (k_B T_bath), internal; infinity for a zero-temperature bath
  double bath_rate = 0;            // gamma, per internal time
  std::vector<std::string> warnings;
  std::vector<std::string> notes;  // what the run did not apply, and why (not a warning)
};

// The noisy TPM work statistics. Route (NoiseRequest::route, the choice and its reason in the
// result): realisations or Lindblad.
//
// Realisations: runs run_work (noiseless) first, then
// request.realisations noisy propagations on its grid and frame with its time steps, spread
// over request.threads worker threads (each realisation one batch of the kept initial
// states, on one thread; results do not depend on the thread count).
//
// Lindblad (white noise only): on the noiseless run's grid and frame, in the truncated
// eigenbasis of the eigenbasis integrator (EigenbasisPropagator: the lowest
// request.eigenbasis_levels levels of H_A, default twice the final levels; its coupling
// M(t), interaction picture and request.ode tolerances), each kept initial level m is
// propagated as rho_m = |m_A><m_A| under
//   d rho/dt = -i [diag(E) + M(t), rho] + sum_p gamma_p (D_p rho D_p - (1/2) {D_p^2, rho}),
//   D_p = Phi^T diag(dV/dp(x, t)) Phi dx,  gamma_p = S_p / 2  (derivation in noise.cpp),
// and P(m -> n) = <n_B| rho_m(tau) |n_B>. Deterministic: the estimates carry error 0 (their
// accuracy is the ODE tolerance and the basis truncation, as for the eigenbasis integrator).
//
// Throws InputError for an address the potential does not have, an empty request, or the
// Lindblad route asked for with a coloured (table) PSD (key noise.route); PhysicsError for
// the sudden limit (tau = 0) or the realisations route with the eigenbasis integrator.
// `noiseless`, when given, is run_work(base, protocol, request) already computed (the front
// end's run), used instead of a second run.
NoisyWorkResult run_noisy_work(const Potential& base, const Protocol& protocol, const WorkRequest& request,
                               const NoiseRequest& noise, const WorkResult* noiseless = nullptr);

// The summary sentence of the PSD convention.
std::string noise_psd_convention();

}  // namespace trapwork
