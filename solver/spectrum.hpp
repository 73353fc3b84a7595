#pragma once
// Lowest eigenpairs of H = p^2/2 + V(x) on a grid, with the accuracy they carry.
//
// Methods:
//   dense    - Eigen's SelfAdjointEigenSolver on the pseudo-spectral (Fourier or sine) matrix;
//              for n up to `dense_limit`.
//   lanczos  - Spectra's shift-invert Lanczos (SymEigsShiftSolver, shift below min V) on the
//              sparse finite-difference Hamiltonian of order `fd_order`, then Rayleigh-Ritz
//              refinement against the grid's own pseudo-spectral Hamiltonian (applied by FFT),
//              in the span of the Lanczos vectors and their residuals, until the residuals
//              ||H psi - E psi|| fall below `residual_tolerance` (so that the states are the
//              propagator's eigenstates, not the finite-difference ones).
//   hermite  - dense diagonalisation in a Hermite-function basis (polynomial potentials only).
// Sign convention: real states; on an open grid the outermost right lobe is positive (as
// phi_n ~ +x^n for an oscillator); in a hard-walled box the first lobe at the left wall is
// positive (as sin(n pi x/L)).
#include <Eigen/Dense>
#include <functional>
#include <memory>
#include <mutex>
#include <optional>
#include <string>
#include <vector>

#include "potentials/potential.hpp"
#include "solver/grid.hpp"
#include "solver/units.hpp"

namespace trapwork {

enum class EigenMethod { automatic, dense, lanczos, finite_difference, hermite };

class SpectrumMemo;
struct CostEstimate;

struct SpectrumOptions {
  int levels = 10;                  // K, the number of lowest eigenpairs wanted
  EigenMethod method = EigenMethod::automatic;
  int fd_order = 8;                 // 2, 4, 6, 8: stencil for lanczos / finite_difference
  std::size_t dense_limit = 1024;   // automatic: dense up to this many points
  double residual_tolerance = 1e-9; // on ||H psi - E psi|| (energy units), lanczos refinement
  int refinement_sweeps = 8;        // at most this many Rayleigh-Ritz sweeps
  double degeneracy_tolerance = 1e-9;  // levels closer than this (energy units) form a group
  // Memory a computation may use (bytes; 0: no limit): one whose estimate (solver/cost.hpp)
  // exceeds it throws PhysicsError before allocating, with the estimate and what to change.
  // The tool passes the machine's available memory; it does not change any result.
  double memory_limit = 0;
  // Optional: spectra solved before from equal inputs (grid, samples, the options above but
  // `levels`) with at least `levels` levels are returned from here (their lowest `levels` pairs)
  // instead of solved again. A dense solve gives the same pairs either way; a Lanczos solve of
  // more levels gives pairs equal within the residual tolerance (measured: energies to 1e-13,
  // states to 1e-12).
  std::shared_ptr<SpectrumMemo> memo;
  // With a memo: solve at least this many levels (at most half the points) when a spectrum is
  // not found, keep them, and serve this and later requests for fewer levels from them. A
  // caller that expects to ask for more levels later (run_work enlarging its levels) asks for
  // them at once, so that each Hamiltonian is solved once. Ignored without a memo.
  int memo_levels = 0;
  // Optional: called at every step of the sparse eigensolver (each shift-invert application) and
  // of its refinement, so that a front end can stop a long solve (its Ctrl-C) by throwing from
  // it; the exception passes through unchanged. Not called by the dense solvers (at most
  // dense_limit points or a Hermite basis: seconds at most). Does not change any result.
  std::function<void()> interrupt;
  // Optional: told the estimate (solver/cost.hpp) of each solve before it starts, after its
  // memory check, so that a front end can say that a long one is coming. Not called for a
  // spectrum served from the memo. Does not change any result.
  std::function<void(const CostEstimate&)> on_estimate;
};

// Eigenpairs on one grid. Energies ascend; states are columns normalised on the grid.
struct Spectrum {
  Grid grid = Grid::periodic(0, 1, 4);
  Eigen::VectorXd energies;
  Eigen::MatrixXd states;           // n x K
  std::vector<double> residuals;    // ||H psi - E psi|| with the grid's pseudo-spectral H
  std::vector<int> group;           // degenerate-group index of each level (0, 1, 2, ...)
  int converged = 0;                // levels whose residual is below residual_tolerance
  double residual_tolerance = 0;    // the one applied: the requested one, or the rounding floor
                                    // of H psi on this grid if that is higher
  std::string method;               // "dense Fourier", "Lanczos FD-8 + Fourier Rayleigh-Ritz"...
  int iterations = 0;               // Lanczos restarts or refinement sweeps used
};

// Lowest eigenpairs of the potential samples v on the grid. Throws PhysicsError if more levels
// are asked for than the grid holds. Uses options.memo when it is set.
Spectrum solve_spectrum(const Grid& grid, const std::vector<double>& v, const SpectrumOptions& options);

// Spectra kept for reuse by a caller that solves the same problems again: `trapwork work
// --tolerance` repeats a run at other step counts on the same grid, a duration sweep has the
// same H_A and H_B at every point, and run_work's enlarged levels ask again for more. A
// spectrum is found by exact equality of the grid, the potential samples and the options but
// the level count, which may be larger (the lowest levels asked for are returned). Safe to share
// between threads; it keeps at most `bytes` of states, dropping the oldest first. Owned by the
// caller: the library keeps no state.
class SpectrumMemo {
 public:
  explicit SpectrumMemo(std::size_t bytes = std::size_t(256) << 20) : budget_(bytes) {}
  std::optional<Spectrum> find(const Grid& grid, const std::vector<double>& v, const SpectrumOptions& options) const;
  void keep(const Grid& grid, const std::vector<double>& v, const SpectrumOptions& options, const Spectrum& s);
  std::size_t reused() const;  // spectra returned by find
  std::size_t solved() const;  // spectra solved through the memo (kept unless above its budget)

  // WKB level energies (wkb_level_energies, compute_spectrum's top-level estimate) of a scan of
  // V, found by exact equality of the scan's samples and the same request (count, only the
  // highest): the same numbers as solving again. The last 8 scans are kept (1.6 MB each).
  std::optional<std::vector<double>> find_wkb(const std::vector<double>& scan, double lo, double step, int count,
                                              bool only_highest) const;
  void keep_wkb(const std::vector<double>& scan, double lo, double step, int count, bool only_highest,
                const std::vector<double>& energies);
  // WKB levels solved through the memo (a request for only the highest counts one).
  std::size_t wkb_levels() const;

 private:
  struct WkbEntry {
    std::vector<double> scan;
    double lo = 0, step = 0;
    std::vector<std::pair<std::pair<int, bool>, std::vector<double>>> energies;  // (count, only highest)
  };
  std::vector<WkbEntry> wkb_;  // oldest first
  struct Entry {
    Grid grid;
    std::vector<double> v;
    SpectrumOptions options;  // without its memo
    Spectrum spectrum;
  };
  std::size_t budget_, held_ = 0;
  mutable std::size_t reused_ = 0;
  std::size_t solved_ = 0, wkb_levels_ = 0;
  std::vector<Entry> entries_;  // oldest first
  mutable std::mutex mutex_;
};

// The residual tolerance a grid allows: the requested one, or 64 eps (max kinetic + max |V|),
// the rounding floor of applying H in double precision (a backward-stable residual is
// ~ eps ||H||; common practice), whichever is larger. Very fine grids raise the floor.
double effective_tolerance(const Grid& grid, const std::vector<double>& v, double requested);

// Hermite functions in the basis of a method = "hermite" spectrum of `levels` levels.
int hermite_basis_size(int levels);

// Whether solve_spectrum solves a grid of `points` points densely with these options.
bool solves_dense(const SpectrumOptions& options, std::size_t points);

// The lowest k pairs of s (1 <= k <= its levels), with their residuals, groups and converged count.
Spectrum lowest_levels(const Spectrum& s, int k);

// Groups levels whose neighbouring spacing is below tol (relative to 1 energy unit).
std::vector<int> degenerate_groups(const Eigen::VectorXd& energies, double tolerance);

// The harmonic approximation at the global minimum of V in [lo, hi]: V ~ v_min + omega^2 (x -
// x_min)^2 / 2. omega = 0 where V is flatter than quadratic (pure quartic).
struct HarmonicApproximation {
  double x_min = 0, v_min = 0, omega = 0;
};
HarmonicApproximation harmonic_approximation(const Potential& potential, double lo, double hi);

// Per-level properties for the tables.
struct Level {
  double energy = 0;
  double spacing = 0;          // E_{n+1} - E_n (NaN for the last level)
  double mean_x = 0;           // <x>
  double mean_x2 = 0;          // <x^2>
  double harmonic_shift = 0;   // E_n - (v_min + omega (n + 1/2)); NaN where omega = 0
  bool bound = true;           // E_n below the lower asymptote, and edge density below 1e-6
  int group = 0;
  double residual = 0;
  double edge_amplitude = 0;   // max |psi|^2 on the outer 4 points of an open grid, relative to max |psi|^2
};

// What the spectrum request and the automatic grid choice need.
struct SpectrumRequest {
  SpectrumOptions options;
  std::optional<std::pair<double, double>> box;       // hard walls (left, right)
  std::optional<std::pair<double, double>> extent;    // fixed open grid [lo, hi]
  std::optional<std::size_t> points;                  // fixed number of points
  double search_half_width = 500;  // open grids: where to look for the minimum and turning points
  double search_centre = 0;
  double decay = 20;               // WKB decay exponent required beyond the turning points
  bool convergence_check = true;   // repeat on a finer, wider grid and compare
  double energy_tolerance = 1e-9;  // automatic grids are refined until bound energies change less
  double edge_tolerance = 1e-8;    // ... and widened while a bound state's edge density exceeds this
  MessageUnits message_units;      // how warnings and errors write lengths and energies
};

struct GridConvergence {
  bool done = false;
  Grid finer = Grid::periodic(0, 1, 4);
  double max_energy_change = 0;            // max_n |E_n(finer) - E_n|
  std::vector<double> energy_change;       // per level
};

struct SpectrumResult {
  Spectrum spectrum;
  std::vector<Level> levels;
  HarmonicApproximation harmonic;
  double threshold = 0;             // lower asymptote of V (+inf for confining potentials)
  bool finite_depth = false;
  double energy_cutoff = 0;         // energy range the grid was chosen for
  GridConvergence convergence;
  std::vector<std::string> warnings;  // with the diagnostic value and what to change
  struct {
    int raised = 0, widened = 0, refined = 0;  // automatic grid adaptations made
  } adaptations;
};

// Potential values far above the energy range are capped at v_min + 1e4 (cutoff - v_min): the
// states have decayed there long before, and huge diagonal entries (an exponential wall)
// would otherwise cost the dense eigensolver its accuracy (rounding ~ 1e-16 max |V|).
void cap_potential(std::vector<double>& v, double v_min, double cutoff);

// Automatic grid for states up to energy_max: extent from the classical turning points plus
// a WKB decay length (integral of sqrt(2 (V - E)) dx = decay beyond each), spacing from the
// largest momentum sqrt(2 (energy_max - v_min)) plus a margin; n rounded to a fast FFT size.
// Throws PhysicsError if V is nowhere below energy_max in the search window.
// One grid for each of several potentials (e.g. a protocol's instants), each at its own time,
// their scans sharing one buffer: a scan is 200001 points, and fresh vectors for each cost more
// in page faults and zeroing than the scan's own arithmetic (perf, a lab-frame run's 15 instants).
std::vector<Grid> choose_grids(const std::vector<Potential>& potentials, double energy_max,
                               const SpectrumRequest& request);

// WKB estimates of the energies of levels 0 .. count - 1 (sum p dx = pi (K + 1/2)) from one
// scan of V over [lo, hi], each capped at the threshold and found to 1e-12 (1 + |E|) (for
// predictions: how many levels a thermal state needs before any is solved).
// With a memo: served from (and kept in) it (SpectrumMemo::find_wkb).
std::vector<double> wkb_level_energies(const Potential& potential, int count, double lo, double hi,
                                       const std::shared_ptr<SpectrumMemo>& memo = nullptr);

// Full pipeline: grid (automatic or fixed), eigenpairs, level table, convergence estimate,
// warnings (unbound states asked for, states touching the grid edge, unconverged residuals).
SpectrumResult compute_spectrum(const Potential& potential, const SpectrumRequest& request);

std::vector<Level> analyse_levels(const Spectrum& spectrum, const HarmonicApproximation& harmonic,
                                  double threshold);

}  // namespace trapwork
