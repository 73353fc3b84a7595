#pragma once
// Work statistics in the two-point energy-measurement (TPM) scheme:
//   P(W) = sum_{m,n} p_m P(m -> n) delta(W - (E_n^B - E_m^A)),  P(m -> n) = |<n_B|U(tau)|m_A>|^2
// (Talkner, Lutz & Hanggi, PRE 75, 050102(R) (2007), title from memory). Internal units
// (hbar = m = 1, solver/units.hpp): energies, work and beta (1/energy) in internal units.
//
// Fluctuation relations checked here (exact identities in the TPM scheme for a unitary U and a
// Gibbs initial state; Tasaki, arXiv:cond-mat/0009244 (2000), from memory; Kurchan,
// arXiv:cond-mat/0007360 (2000), from memory):
//   Jarzynski   <exp(-beta W)> = Z_B / Z_A = exp(-beta Delta F)
//   Tasaki-Crooks  P_F(W) / P_R(-W) = exp(beta (W - Delta F)), line by line
//                  P_F(m -> n) = P_R(n -> m) for Hamiltonians real in x (microreversibility).
// Neither checks accuracy (both hold for any unitary evolution; with a symmetric splitting
// Crooks holds line by line at any time step): the work lines are checked separately.
#include <Eigen/Dense>
#include <complex>
#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "potentials/protocol.hpp"
#include "solver/cost.hpp"
#include "solver/propagator.hpp"
#include "solver/spectrum.hpp"
#include "solver/thermal.hpp"

namespace trapwork {

// P(m, n) = P(m -> n): row m = initial level of the run's first Hamiltonian (H_A forward,
// H_B reverse), column n = final level of its second. Rows: the initial levels kept;
// columns: the final levels computed. 1 - (row sum) is the unresolved weight of that row.
struct TransitionMatrix {
  Eigen::MatrixXd probability;
  int initial_levels() const { return int(probability.rows()); }
  int final_levels() const { return int(probability.cols()); }
  Eigen::VectorXd unresolved() const;  // 1 - sum_n P(m -> n) per row
};

// From amplitudes A(n, m) = <n_final|U|m_initial> (as from project()): P(m, n) = |A(n, m)|^2.
TransitionMatrix transition_matrix(const Eigen::MatrixXcd& amplitudes);
// Adiabatic limit (no level crossings): P(m -> n) = delta_mn, so W = E_m^B - E_m^A.
TransitionMatrix adiabatic_transition_matrix(int initial_levels, int final_levels);

struct WorkLine {
  double work = 0;         // E_n^B - E_m^A (group mean energies)
  double probability = 0;  // sum over merged (m, n) of p_m P(m -> n)
  int initial = 0;         // lowest initial level m of the first merged pair
  int final = 0;           // lowest final level n of the first merged pair
};

// What a distribution is built from.
struct WorkInput {
  TransitionMatrix transitions;
  Eigen::VectorXd initial_energies;  // E_m^A, at least transitions.initial_levels() of them
  Eigen::VectorXd final_energies;    // E_n^B, exactly transitions.final_levels()
  std::vector<double> initial_weights;  // p_m of the kept levels (sum 1)
  std::vector<int> initial_groups;      // degenerate group of each initial level (empty: none)
  std::vector<int> final_groups;        // degenerate group of each final level (empty: none)
  std::optional<double> beta;           // Gibbs initial state: enables the Jarzynski quantities
};

// The distribution with its moments and fluctuation-relation quantities. Lines are sorted by
// work; lines whose work differs by less than merge_tolerance (energy units) from the first
// line of a run are merged (harmonic traps have equal spacings). Degenerate groups are
// measured as one eigenspace: probabilities summed over the group, energy the group mean.
struct WorkDistribution {
  std::vector<WorkLine> lines;
  double merge_tolerance = 0;
  double mean = 0, variance = 0, skewness = 0;  // of the resolved lines, renormalised by their total
  double resolved_weight = 0;                  // sum of line probabilities
  double unresolved_weight = 0;                // sum_m p_m (1 - sum_n P(m -> n))
  // Gibbs initial state only (NaN otherwise):
  double beta = std::numeric_limits<double>::quiet_NaN();
  double jarzynski_average = std::numeric_limits<double>::quiet_NaN();  // <exp(-beta W)>
  double partition_ratio = std::numeric_limits<double>::quiet_NaN();    // Z_B / Z_A over the given levels
  double free_energy_change = std::numeric_limits<double>::quiet_NaN(); // Delta F = -ln(Z_B/Z_A)/beta
  double dissipated_work = std::numeric_limits<double>::quiet_NaN();    // <W> - Delta F
  double jarzynski_residual = std::numeric_limits<double>::quiet_NaN(); // <exp(-beta W)> / (Z_B/Z_A) - 1
};

// <exp(-beta W)> = (1/Z_A^K) sum_n exp(-beta E_n^B) sum_m P(m -> n) for Gibbs weights p_m over
// the K kept levels, evaluated with energies shifted by E_0^A and E_0^B (no overflow or
// underflow) as p_0 sum_n exp(-beta (E_n - E_0^B)) sum_m P(m,n), times exp(-beta (E_0^B - E_0^A)):
// for Gibbs weights p_m exp(beta (E_m - E_0^A)) = p_0, so every kept row counts, also those
// whose weight p_m underflows to 0. Z_B / Z_A uses all the energies given. With beta given the
// weights must be Gibbs weights over the rows (programmer error otherwise).
WorkDistribution work_distribution(const WorkInput& input, double merge_tolerance = 1e-9);

// Histogram with bins [start + k width, start + (k+1) width), start = floor(W_min/width) width.
struct WorkHistogram {
  double start = 0, width = 0;
  std::vector<double> probability;
};
WorkHistogram histogram(const WorkDistribution& d, double bin_width);
// Density sum_l p_l N(W - W_l; sigma) at the points w: the distribution seen through a
// Gaussian energy-measurement resolution sigma > 0 (energy units).
std::vector<double> broadened_density(const WorkDistribution& d, double sigma, const std::vector<double>& w);
// Characteristic function G(u) = <exp(i u W)> = sum_l p_l exp(i u W_l) (u in 1/energy).
std::vector<std::complex<double>> characteristic_function(const WorkDistribution& d, const std::vector<double>& u);

// Tasaki-Crooks checks from the forward matrix (A -> B) and reverse matrix (B -> A):
//   max_line_difference  max over group pairs of |P_F(g -> h) - P_R(h -> g)|, where P(g -> h) is
//                        the block sum over the degenerate groups divided by the size of the
//                        initial group (basis-independent); over levels kept in both runs
//   max_ratio_error      max over work values W (pairs kept in both runs, both probabilities
//                        above min_probability) of |P_F(W) / (P_R(-W) exp(beta (W - dF))) - 1|.
//                        With weights normalised over K kept levels this is exact up to
//                        eps_A + eps_B (the left-out thermal weights).
struct CrooksCheck {
  double max_line_difference = 0;
  double max_ratio_error = 0;
  int lines_compared = 0;
  int ratios_compared = 0;
};
// Distance between two computations of the same work distribution (say at two time steps or
// grids), line by line: the lines m -> n carry p_m P(m -> n) in each, and
//   distance = (1/2) sum_{m,n} |p_m P(m->n) - p'_m P'(m->n)|
// over the levels both hold, plus half the joint probability either holds outside them, plus
// half the difference of their unresolved weights. It bounds the total-variation distance of
// the two P(W) when matching lines sit at the same work; `max_work_shift` is the largest
// |W - W'| of matching lines carrying more than 1e-9, so both together say how far apart the
// distributions are.
struct LineDistance {
  double distance = 0;
  double max_work_shift = 0;
};
LineDistance line_distance(const WorkInput& a, const WorkInput& b);

CrooksCheck crooks_check(const WorkInput& forward, const WorkInput& reverse, double merge_tolerance = 1e-9,
                         double min_probability = 1e-10);

// ---- moments with their truncation error ----------------------------------------------------
//
// The line sums <W^k> = sum_{m,n} p_m P(m->n) (E_n^B - E_m^A)^k over the final levels kept can
// miss weight far up (small in probability, large in W^k) while every line is right. The same
// moments follow from each propagated state psi_m = U|m_A> itself, with no final-level sum:
//   w_m = <psi_m|H_B|psi_m> - E_m^A,
//   s_m = ||H_B psi_m||^2 - 2 E_m^A <psi_m|H_B|psi_m> + (E_m^A)^2     (= <psi_m|(H_B - E_m^A)^2|psi_m>)
//   direct <W> = sum_m p_m w_m, direct <W^2> = sum_m p_m s_m   (over the kept initial levels).
// ||H_B psi||^2 is the honest form of <H_B^2> (a hard wall: H_B psi need not vanish at the wall).
// They equal the line sums over every level of the operator they use (the grid's Fourier or
// sine-basis H_B, the one the spectra come from), so line minus direct is the final-level
// truncation error of the line moments.
struct StateEnergies {
  Eigen::VectorXd energy;          // <psi_m|H_B|psi_m> / <psi_m|psi_m>, one per kept initial level
  // ||(H_B - energy_m) psi_m||^2 / <psi_m|psi_m>: the spread of H_B in the state, computed
  // about its own mean, so that it does not come out of <H_B^2> - <H_B>^2 (with |<H_B>| = 3568
  // and a variance of 0.074, as in a deep tweezer, that difference loses 7 digits to rounding)
  Eigen::VectorXd energy_variance;
};
// On a grid (periodic: Fourier kinetic operator; box: sine basis, KineticOperator), potential v
// of H_B at the grid points, states as columns normalised with the grid spacing.
StateEnergies state_energies(const Grid& grid, const std::vector<double>& v, const Eigen::MatrixXcd& states);

// The moments of the resolved lines (WorkDistribution: mean, variance) against the direct ones,
// and the error estimate of the line moments, in parts (energy and energy^2 units):
//   final    line minus direct (final levels not kept), exact up to rounding;
//   thermal  the initial levels left out (weight eps_K, the kept ones renormalised): true minus
//            kept = eps_K (tail - kept); the tail's row moments estimated as twice the last kept
//            row's (row moments grow at most as a power of the level index; the thermal tail's
//            mean index lies within a few levels of K), so eps_K (2 |w_K-1| + |<W>|);
//   basis    the direct moments' own basis or grid error where the caller has estimated it
//            (a moving wall: the same run on twice the sine modes); 0 where not estimated here
//            (plain grids: grid and time step are separate diagnostics), NaN where unknown.
// mean_error, variance_error: the sums (NaN where a part is unknown or no direct moments).
struct MomentErrors {
  static constexpr double nan = std::numeric_limits<double>::quiet_NaN();
  double mean_direct = nan, variance_direct = nan;
  double mean_final = nan, variance_final = nan;      // line - direct (signed)
  double mean_thermal = 0, variance_thermal = 0;
  double mean_basis = 0, variance_basis = 0;
  double mean_error = nan, variance_error = nan;
  double tolerance = nan;  // relative: mean against max(|<W>|, sd W), variance against var W
  // met: mean_error <= max(tolerance max(|<W>|, sd W), rounding_mean), variance_error <=
  // max(tolerance var W, rounding_variance) (false when NaN)
  bool mean_met() const;
  bool variance_met() const;
  double scale_mean = nan, scale_variance = nan;  // the scales of the two tests
  // What the energies resolve at all: 1e-11 of the largest |E| of the kept initial levels (the
  // direct energies after thousands of steps carry about that much rounding), and the variance
  // that error in sd W makes. A <W> of zero to rounding (a protocol that changes nothing, or
  // one that returns to its start) meets its tolerance there instead of missing it relatively.
  double rounding_mean = 0, rounding_variance = 0;
  // The part that dominates the larger relative miss: "final", "thermal" or "basis" (empty: met).
  std::string dominant() const;
  // The discretisation part: how far the moments move with the time step (and, in a --tolerance
  // search, the grid), measured on the direct moments against a check run: the half-step run
  // (twice the shift, which covers Richardson's 2^p / (2^p - 1) with room outside the asymptotic
  // range: run_work) or the search's pairs (compute_work_to_tolerance). NaN where
  // no check ran; discretisation_from says what measured it. It is kept out of the sums above:
  // they steer the level enlargement, which cannot mend it, and mean_met() stays about
  // truncation. The error printed beside a moment is the sum of both (reported_*_error).
  double mean_discretisation = nan, variance_discretisation = nan;
  std::string discretisation_from;
  double reported_mean_error() const;      // mean_error + mean_discretisation where measured
  double reported_variance_error() const;  // variance_error + variance_discretisation where measured
};
// The direct moments (<W>, var W) of the kept initial levels from their states' energies under
// H_B (see StateEnergies), as moment_errors computes them.
struct DirectMoments {
  double mean = 0, variance = 0;
};
DirectMoments direct_moments(const WorkInput& input, const StateEnergies& direct);
// Sets e's discretisation part from the direct moments of a check run: `factor` times the shift
// of each, with what measured it.
void set_discretisation(MomentErrors& e, const DirectMoments& check, double factor, const std::string& from);
MomentErrors moment_errors(const WorkInput& input, const WorkDistribution& d, const StateEnergies& direct,
                           double left_out_thermal_weight, double tolerance);
// Sets the error sums from the parts (after the caller set a basis part).
void total_moment_errors(MomentErrors& e);
// The warning for moments that miss their tolerance, naming the dominant part as the likely
// cause and what to change (empty when both are met). `basis_cause` says what limits the basis.
// Errors are printed relative to their scales (max(|<W>|, sd W) and var W), as the tolerance
// is, so that the text needs no energy unit.
std::string moment_warning(const MomentErrors& e, int final_levels, const std::string& basis_cause);
// The note (Diagnostics::notes, not a warning) of a run repeated `attempt` times with more
// levels (escape probability now `escape`, moments' relative errors, the final margin and
// thermal tolerance it ended with). What still fails after it is warned on its own.
std::string enlargement_note(int attempt, double escape, const MomentErrors& e, int final_margin,
                             double thermal_tolerance);

// Above this thermal-weighted share of the norm in the outer 2% of the grid's momenta or points
// (Diagnostics::momentum_edge, position_edge) run_work refines the automatic grid, and warns
// where it cannot (the examples' runs show 1e-30 to 1e-28).
inline constexpr double momentum_edge_tolerance = 1e-8;

// Every result carries these (NaN where not computed).
struct Diagnostics {
  double norm_drift = 0;          // max_m | ||psi_m(tau)||^2 - 1 |
  double unresolved_weight = 0;   // weighted probability not captured by the final levels kept
  // per final state max |psi|^2 in the outer 2% of the grid / max |psi|^2, averaged with the
  // initial populations (the larger of the forward and reverse runs)
  double edge_amplitude = 0;
  // The split-operator runs' states near the grid's momentum limit pi hbar/dx: per propagated
  // initial level, the largest share of its norm in the outer 2% of the momenta over the run
  // (BatchedSplitStep::momentum_edge), summed with the initial weights (the larger of the forward
  // and reverse runs). Above momentum_edge_tolerance the motion aliases. NaN: not measured (the
  // eigenbasis ODE, a sudden switch).
  double momentum_edge = std::numeric_limits<double>::quiet_NaN();
  // The same for the outer 2% of the grid points (a periodic grid wraps there too; 0 in a box).
  double position_edge = std::numeric_limits<double>::quiet_NaN();
  int grid_refinements = 0;  // times run_work refined the automatic grid for them
  // H_A or H_B has a finite depth (a tweezer): what passes it leaves the trap wherever the grid
  // ends, so run_work does not widen the grid for position_edge (the unresolved weight says it)
  bool finite_depth = false;
  double time_step_error = std::numeric_limits<double>::quiet_NaN();  // max |dP(m->n)| vs half step
  double max_phase_per_step = 0;  // radians, largest kinetic or potential phase in one step
  double grid_convergence = std::numeric_limits<double>::quiet_NaN(); // max |dE| of kept levels, finer grid
  double jarzynski_residual = std::numeric_limits<double>::quiet_NaN();
  TruncationResidual truncation;  // eps_K, p_R(>=K) and their sum
  double crooks_line_difference = std::numeric_limits<double>::quiet_NaN();
  double crooks_ratio_error = std::numeric_limits<double>::quiet_NaN();
  double ode_arithmetic = 0;      // eigenbasis: estimated operations of the forward run (0: split)
  int ode_basis_levels = 0;       // eigenbasis: levels of its basis (0: split)
  // Forward initial states not propagated again after run_work enlarged the levels: the
  // previous attempt's states at tau, whose eigenvectors agree to 1e-11 (0: none carried).
  int carried_states = 0;
  // The level settings the result was computed with: the request's, or what run_work's
  // enlargement raised them to (0 and NaN: not set).
  int final_margin = 0;
  double thermal_tolerance = std::numeric_limits<double>::quiet_NaN();
  MomentErrors moments;           // direct moments and the error of the line moments
  // Cost estimated before the propagation (solver/cost.hpp, work_cost) from the sizes chosen:
  // peak memory of the large arrays (bytes) and the propagations' floating-point operations.
  double estimated_bytes = 0, estimated_operations = 0;
  std::vector<std::string> warnings;  // each with the diagnostic value and what to change
  // What the run did on its own that the user should know but need not act on (the levels
  // enlarged to bound the escape probability); not warnings: they do not mark a sweep point.
  std::vector<std::string> notes;
};

// ---- time traces of the forward run ----------------------------------------------------------
//
// Averages over the propagated initial states psi_m(t) with their initial weights p_m (thermal
// averages for a Gibbs state), in the lab frame, at observation points t_k (every k-th time
// step, k = ceil(steps / (points - 1)), and tau; points: WorkRequest::trace_points):
//   position_mean(t) = sum_m p_m <psi_m|x|psi_m>
//   energy_mean(t)   = sum_m p_m <psi_m|H(t)|psi_m>,  H(t) = p^2/2 + V(x, t) with the grid's own
//                      kinetic operator and V as the propagator samples it (not capped)
//   populations(k, n) = sum_m p_m |<n(t_k)|psi_m(t_k)>|^2 for the lowest trace_levels
//                      instantaneous eigenstates n(t) of H(t) on the same grid (solve_spectrum;
//                      at t = 0 and tau the run's own H_A and H_B spectra; in a co-moving run
//                      those of H_A carried with the trap, which are exact there).
// Levels of a near-degenerate group (a tunnelling doublet) are listed one by one: how the
// group's population splits between them depends on the basis chosen inside the group.
struct WorkTraces {
  std::vector<double> time;           // internal time
  std::vector<double> position_mean;  // internal length, lab frame
  std::vector<double> energy_mean;    // internal energy
  Eigen::MatrixXd populations;        // one row per time, one column per level
  std::string absent;                 // why nothing was recorded (empty when recorded)
};

// P(n) = sum_m p_m P(m -> n): the final level populations of a run (one per final level).
std::vector<double> final_populations(const WorkInput& input);

// ---- the driver ----------------------------------------------------------------------------

enum class Integrator { strang, fourth_order, eigenbasis };

struct WorkRequest {
  InitialState initial = InitialState::thermal(1);
  double thermal_tolerance = 1e-10;  // eps_K: left-out thermal weight of the initial levels
  int max_initial_levels = 80;
  int min_initial_levels = 0;        // Gibbs states: keep at least these (run_work raises it when
                                     // the reverse run leaves the kept levels, p_R(>=K))
  int final_margin = 20;             // final levels computed = kept initial levels + margin
  SpectrumRequest spectrum;          // grid choice (extent/points fixed or automatic), eigensolver
  Integrator integrator = Integrator::fourth_order;
  int steps = 0;                     // 0: automatic, dt (E_range) <= phase_per_step;
                                     // eigenbasis: 64 (its own steps are adaptive; these are
                                     // the observation and restart points)
  double phase_per_step = 0;         // largest phase per automatic step; 0: 0.2 (order 4), 0.02 (Strang)
  std::optional<bool> co_moving;     // automatic: used whenever the protocol is a rigid translation
  bool reverse_run = true;           // needed for Crooks and p_R(>=K)
  bool time_step_check = true;       // same run at half the step
  bool grid_check = true;            // spectrum of H_A on a finer, wider grid
  double merge_tolerance = 1e-9;
  double unresolved_tolerance = 1e-8;  // warn above this; also the moments' relative tolerance
  OdeTolerances ode;                 // eigenbasis integrator
  double ode_arithmetic_limit = 0;   // > 0: each eigenbasis run throws ArithmeticLimitReached
                                     // past this many estimated operations (see propagator.hpp)
  int eigenbasis_levels = 0;         // eigenbasis basis size; 0: twice the final levels (the
                                     // final states of H_B need more levels of H_A than L)
  int threads = 1;                   // propagator worker threads (results independent of it)
  // FFTW plans of the split-operator runs: FFTW_MEASURE for long runs (fastest, but its choice
  // depends on timing, so two runs may differ at rounding level), or always FFTW_ESTIMATE
  // (the same transforms in every run: sweeps, whose tables must not depend on how they ran).
  bool repeatable_transforms = false;
  int trace_points = 40;             // WorkTraces of the forward run: about this many points
                                     // (< 2: none); each costs about one time step and, in the
                                     // lab frame, one spectrum of trace_levels levels, whose
                                     // estimated arithmetic (cost.hpp) is kept within 5% of the
                                     // run's by taking fewer points (at least 9)
  int trace_levels = 5;              // instantaneous levels whose populations are traced
  // run_work's refinements of the automatic grid (a fixed grid ignores them), at most two, where
  // the propagated states reach the grid's momentum limit (the spacing halved) or its ends (the
  // extent 3/2 as wide about its centre): Diagnostics::momentum_edge, position_edge.
  double spacing_factor = 1, extent_factor = 1;
  int grid_refinements = 0;
  std::function<void(double fraction)> progress;  // optional, called with 0..1
  // Optional: called with a new stage's name when the work restarts (run_work's enlargement of
  // the levels); the progress then runs from 0 to 1 again for that stage.
  std::function<void(const std::string& stage)> stage;
  // Optional: called once the grid, levels and steps are chosen, before the propagation, with
  // the estimated memory and arithmetic (the tool prints it for long runs). The memory limit
  // is request.spectrum.options.memory_limit: a run estimated above it throws PhysicsError
  // before its spectra on the common grid are computed.
  std::function<void(const CostEstimate&)> on_estimate;
  // Optional: given to the spectra the run solves (SpectrumOptions::on_estimate): each solve's
  // estimate before it starts, on one thread (the two spectra run side by side). Kept apart
  // from on_estimate, which callers use to size the run itself.
  std::function<void(const CostEstimate&)> on_spectrum_estimate;
};

// Harmonic reference prediction for the trap's harmonic part (omega_h = the summed harmonic
// frequency of the harmonic and polynomial terms), when the protocol is a rigid translation
// (displaced oscillator) or changes only that frequency (Husimi). For an anharmonic trap
// this is the idealisation the result departs from; for a purely harmonic one it is exact.
struct HarmonicComparison {
  std::string model;               // "displaced oscillator" or "parametric oscillator (Husimi)"
  double parameter = 0;            // |alpha|^2 or Q*
  bool exact = false;              // the potential is one harmonic term: the reference is exact
  TransitionMatrix reference;      // analytic P(m->n), same shape as the numeric one
  std::vector<double> initial_weights;  // p_m of the reference (harmonic Gibbs weights at the same beta)
  WorkDistribution distribution;   // harmonic energies, harmonic Gibbs weights at the same beta
  double max_line_difference = 0;  // max |P(m->n) - P_ref(m->n)| by level index
  double mean_work = 0;            // analytic <W>: closed form over all levels for a Gibbs state
                                   // (distribution.mean, on the run's levels, otherwise)
};

// The harmonic prediction's <W> and sd W alone (no numerical run, cheap enough to evaluate
// densely over a sweep), for the models of HarmonicComparison and the initial state taken in the
// harmonic trap omega0, of mean occupation nbar (thermal: 1/(exp(beta omega0) - 1); phonons:
// nbar; level n: n; a mixture: sum m p_m):
// displaced oscillator <W> = omega |alpha|^2, var W = omega^2 |alpha|^2 (2 nbar + 1) (the
// thermal form of displaced_thermal_variance with coth(beta omega/2) = 2 nbar + 1); parametric
// oscillator <W> = (omega1 Q* - omega0)(nbar + 1/2) (parametric_mean_work), var W =
// omega1^2 (Q*^2 - 1) <m^2 + m + 1> / 2 + (omega1 Q* - omega0)^2 var m over the initial level
// index m (derived in work.cpp). Nothing, with the reason in why_not, where no harmonic model applies.
struct HarmonicMoments {
  std::string model;
  double mean = 0;
  double sd = std::numeric_limits<double>::quiet_NaN();
};
std::optional<HarmonicMoments> harmonic_moments(const Potential& base, const Protocol& protocol,
                                                const InitialState& initial, std::string& why_not);

struct WorkResult {
  Grid grid = Grid::periodic(0, 1, 4);  // the forward propagation grid
  bool co_moving = false;
  int steps = 0;
  std::string method;
  double energy_cutoff = 0;     // the cap of the potential samples its spectra saw (cap_potential)
  Spectrum initial_spectrum, final_spectrum;  // H_A, H_B (forward run's grid/frame)
  WorkInput forward;
  std::optional<WorkInput> reverse;
  WorkDistribution distribution;
  std::optional<WorkDistribution> reverse_distribution;
  std::optional<CrooksCheck> crooks;
  std::optional<HarmonicComparison> harmonic;
  std::string harmonic_absent;  // why there is no harmonic reference (empty when there is one)
  Diagnostics diagnostics;
  WorkTraces traces;            // of the forward run (absent says why when empty)
};

// The whole TPM calculation: grid (automatic or fixed; the lab-frame grid covers the initial,
// final and intermediate potentials, the co-moving one only the initial), spectra of H_A and
// H_B on it, initial levels by the thermal tolerance, one batched propagation of all kept
// initial states, projection on the final eigenstates, reverse run (reversed protocol from
// H_B's thermal levels), distributions, Crooks, the time-step error (half step), norm drift,
// edge amplitude, the truncation terms of the Jarzynski residual and harmonic references.
// tau = 0 is the sudden limit (U = 1). Throws PhysicsError when the spectra cannot hold the
// levels needed; InputError for protocol addresses the potential does not have.
WorkResult run_work(const Potential& base, const Protocol& protocol, const WorkRequest& request);
// The settings of run_work's next attempt after an attempt with request r and diagnostics d,
// enlarged only where it missed:
// - probability escaping the final levels (d.unresolved_weight above r.unresolved_tolerance),
//   or moments that miss with the final-level or basis part the largest, or either at a third
//   of the tolerance or more: twice the final margin;
// - moments that miss with the thermal part the largest, or at a third of the tolerance or
//   more: the thermal tolerance divided by ten times the factor by which that part alone missed
//   (at least 10, at most 1e6). The part is proportional to the left-out weight; the ten covers
//   the larger work of the levels kept next. (A fixed 1000 kept 66 states on the benchmark's
//   quartic move where 58 meet the tolerance.)
// - max_initial_levels, a cap, doubles.
WorkRequest enlarged_request(WorkRequest r, const Diagnostics& d);

}  // namespace trapwork
