#pragma once
// Cost before commitment: the memory and arithmetic of a computation estimated from the sizes
// it has chosen (grid points, levels, initial states, steps, runs), before it allocates, so
// that a run which cannot fit in memory is refused with the estimate and what to change
// instead of failing (or swapping) hours later. Pure functions of sizes: the machine's memory
// is the caller's to find out (the tool reads it and passes it in as a limit).
//
// The estimates count the large arrays (8-byte doubles, 16-byte complex samples) and the
// dominant arithmetic; they are meant to be right within a factor of about 2, which is enough
// to tell a run of minutes from one of days, or 1 GB from 100 GB.
#include <cstddef>
#include <string>

namespace trapwork {

struct CostEstimate {
  double bytes = 0;       // peak memory of the large arrays
  double operations = 0;  // floating-point operations (order of magnitude)
  std::string what;       // what holds the memory, e.g. "2 spectra of 100 levels on 16777216 points"
  std::string change;     // what to change to make it smaller (names the scenario key)
};

// One eigensolve of `levels` levels on `points` grid points (solve_spectrum): dense, the
// matrix, its eigenvectors and the solver's copy, 3 n^2 doubles and about 9 n^3 operations
// (symmetric QR with eigenvectors; Golub and Van Loan, Matrix Computations, section 8.3, from
// memory); shift-invert Lanczos, the Lanczos basis and the refinement's vectors, images and
// corrections, about n (2 ncv + 4 levels) doubles with ncv = 1.5 (levels + levels / 4) + 20,
// and the sparse factorisation, n (4 fd_order + 2) doubles.
CostEstimate spectrum_cost(std::size_t points, int levels, bool dense, int fd_order = 8);

// The work calculation after its grid is chosen (run_work): the spectra of H_A and H_B
// (`spectra` of them, points x levels doubles each), the propagated states and their copy
// (2 x points x kept complex), the eigenbasis ODE's basis when used (basis_levels > 0: points
// x basis_levels doubles and its products), plus the largest single eigensolve. Operations:
// `runs` propagations (forward, the half-step check counting 2, reverse) of `kept` states
// over `steps` steps of `substeps` Strang substeps, each substep two transforms of 5 n log2 n
// (the radix-2 count, common practice) and three pointwise products of 6 n.
struct WorkSizes {
  std::size_t points = 0;
  int levels = 0;        // levels of each spectrum
  int kept = 0;          // initial states propagated (at most)
  int spectra = 2;       // spectra held at once (4 in a co-moving frame with a reverse run)
  int steps = 0;         // 0: not known yet (no operations counted)
  int substeps = 3;      // Strang substeps per step: 3 for the order-4 triple jump, 1 for Strang
  double runs = 1;       // propagations of `steps` steps: 1 forward + 2 half-step check + 1 reverse
  int basis_levels = 0;  // eigenbasis ODE: levels of its basis (0: split-operator)
  bool dense = true;     // the eigensolver used on this grid
};
CostEstimate work_cost(const WorkSizes& sizes);

// `trapwork plan`: synthetic experiments drawn from the model. One experiment of N runs holds
// its N samples (8 bytes each) at once; each draw costs a binary search over the lines, an
// exponential and, with a resolution, a normal deviate: counted as 250 + log2(lines)
// operations, the time of about 50 ns that 1e8 draws took on the development machine at the
// rate estimated_seconds assumes (solver/scenario/machine.hpp). `draws` = experiments x (sum of
// N) x resolutions.
CostEstimate plan_cost(double largest_runs, double draws, std::size_t lines);

// Throws PhysicsError when limit_bytes > 0 and the estimate exceeds it:
//   "<context>: <what> needs about 40 GB of memory, more than the 21 GB available: <change>".
void check_memory(const CostEstimate& estimate, double limit_bytes, const std::string& context);

// The automatic step count of a split-operator run: ceil(duration x rate / phase per step), at
// least 16. Throws PhysicsError when it is not finite or above 1e9 (days of arithmetic even on
// the smallest grids, and beyond an int), saying what to change.
int automatic_steps(double duration_times_rate, double phase_per_step);

// "512 MB", "40 GB": bytes in decimal units with 2 significant digits.
std::string bytes_text(double bytes);

}  // namespace trapwork
