#include "solver/spectrum.hpp"

#include <Eigen/SparseCholesky>
#include <Spectra/SymEigsShiftSolver.h>
#include <boost/math/tools/toms748_solve.hpp>

#include <algorithm>
#include <cmath>
#include <limits>
#include <span>
#include <tuple>

#include "solver/cost.hpp"
#include "solver/errors.hpp"
#include "solver/hamiltonian.hpp"
#include "solver/units.hpp"

namespace trapwork {

namespace {

constexpr double inf = std::numeric_limits<double>::infinity();

std::string fmt(double v) {
  char b[48];
  std::snprintf(b, sizeof b, "%.6g", v);
  return b;
}

// (H - sigma)^{-1} by a sparse LDL^T factorisation, made once per shift (H - sigma is positive
// definite for a shift below the spectrum). Models Spectra's shift-solve operator concept.
class ShiftInvert {
 public:
  using Scalar = double;
  ShiftInvert(const Eigen::SparseMatrix<double>& h, const std::function<void()>& interrupt)
      : h_(h), interrupt_(interrupt) {}
  Eigen::Index rows() const { return h_.rows(); }
  Eigen::Index cols() const { return h_.cols(); }
  void set_shift(double sigma) {
    Eigen::SparseMatrix<double> identity(h_.rows(), h_.cols());
    identity.setIdentity();
    if (!analysed_) solver_.analyzePattern(h_);  // the pattern is the same for every shift
    analysed_ = true;
    solver_.factorize(h_ - sigma * identity);
    if (solver_.info() != Eigen::Success)
      throw PhysicsError("shift-invert: factorisation of H - sigma failed (sigma = " + fmt(sigma) + ")");
  }
  void perform_op(const double* in, double* out) const {
    if (interrupt_) interrupt_();
    Eigen::Map<const Eigen::VectorXd> x(in, h_.rows());
    Eigen::Map<Eigen::VectorXd> y(out, h_.rows());
    y = solver_.solve(x);
  }
  Eigen::MatrixXd solve(const Eigen::MatrixXd& b) const { return solver_.solve(b); }

 private:
  const Eigen::SparseMatrix<double>& h_;
  const std::function<void()>& interrupt_;
  bool analysed_ = false;
  Eigen::SimplicialLDLT<Eigen::SparseMatrix<double>> solver_;  // also used at indefinite shifts (no zero pivots met in practice)
};

// Sign convention (see the header): the outermost right lobe positive on an open grid, the first
// lobe at the left wall positive in a box.
void fix_signs(const Grid& grid, Eigen::MatrixXd& states) {
  for (Eigen::Index k = 0; k < states.cols(); ++k) {
    auto col = states.col(k);
    const double threshold = 1e-3 * col.cwiseAbs().maxCoeff();
    double sign = 1;
    if (grid.boundary() == Boundary::periodic) {
      for (Eigen::Index j = col.size() - 1; j >= 0; --j)
        if (std::abs(col(j)) > threshold) { sign = col(j) > 0 ? 1 : -1; break; }
    } else {
      for (Eigen::Index j = 0; j < col.size(); ++j)
        if (std::abs(col(j)) > threshold) { sign = col(j) > 0 ? 1 : -1; break; }
    }
    col *= sign;
  }
}

// H applied to many columns, a block of at most 16 at a time (bounded transform buffers).
Eigen::MatrixXd apply_in_blocks(const Grid& grid, const std::vector<double>& v, const Eigen::MatrixXd& in) {
  constexpr Eigen::Index block = 16;
  Eigen::MatrixXd out(in.rows(), in.cols()), part;
  std::optional<KineticOperator> full, rest;
  for (Eigen::Index c = 0; c < in.cols(); c += block) {
    const Eigen::Index width = std::min(block, in.cols() - c);
    auto& op = width == block ? full : rest;
    if (!op) op.emplace(grid, int(width));
    apply_hamiltonian(*op, v, in.middleCols(c, width), part);
    out.middleCols(c, width) = part;
  }
  return out;
}

// Rayleigh-Ritz with the grid's pseudo-spectral H in the span of `basis` (columns nearly
// orthonormal: the generalized problem with the overlap matrix absorbs the rest); returns
// the lowest `keep` Ritz pairs and their images H psi.
struct Ritz {
  Eigen::VectorXd values;
  Eigen::MatrixXd vectors, images;
};
Ritz rayleigh_ritz(const Grid& grid, const std::vector<double>& v, const Eigen::MatrixXd& basis, int keep) {
  const Eigen::MatrixXd hb = apply_in_blocks(grid, v, basis);
  Eigen::MatrixXd s = basis.transpose() * hb;
  s = 0.5 * (s + s.transpose()).eval();
  const Eigen::MatrixXd m = basis.transpose() * basis;
  Eigen::GeneralizedSelfAdjointEigenSolver<Eigen::MatrixXd> eig(s, m);
  if (eig.info() != Eigen::Success) throw PhysicsError("Rayleigh-Ritz refinement failed (dependent basis)");
  const Eigen::MatrixXd y = eig.eigenvectors().leftCols(keep);
  return {eig.eigenvalues().head(keep), basis * y, hb * y};
}

// Orthonormalises the columns of c against the orthonormal columns of q and among themselves
// (two passes of classical Gram-Schmidt, then a thin QR); drops columns that vanish.
Eigen::MatrixXd orthonormal_complement(const Eigen::MatrixXd& q, Eigen::MatrixXd c) {
  for (int pass = 0; pass < 2; ++pass) c -= q * (q.transpose() * c);
  std::vector<Eigen::Index> keep;
  for (Eigen::Index j = 0; j < c.cols(); ++j)
    if (c.col(j).norm() > 1e-10) keep.push_back(j);
  Eigen::MatrixXd kept(c.rows(), Eigen::Index(keep.size()));
  for (std::size_t j = 0; j < keep.size(); ++j) kept.col(Eigen::Index(j)) = c.col(keep[j]).normalized();
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(kept);
  Eigen::MatrixXd thin = qr.householderQ() * Eigen::MatrixXd::Identity(kept.rows(), kept.cols());
  for (int pass = 0; pass < 2; ++pass) thin -= q * (q.transpose() * thin);
  for (Eigen::Index j = 0; j < thin.cols(); ++j) thin.col(j).normalize();
  return thin;
}

Eigen::VectorXd residual_norms(const Eigen::MatrixXd& states, const Eigen::MatrixXd& images,
                               const Eigen::VectorXd& energies) {
  Eigen::VectorXd r(states.cols());
  for (Eigen::Index k = 0; k < states.cols(); ++k)
    r(k) = (images.col(k) - energies(k) * states.col(k)).norm() / states.col(k).norm();
  return r;
}

// The potential sampled over a search window, for minima, turning points and WKB integrals.
struct Scan {
  std::vector<double> x, v;
  double step = 0;
};
// Into s (its vectors reused when they have the size already).
void scan_potential(Scan& s, const Potential& potential, double lo, double hi, double t,
                    const MessageUnits& units = {}, std::size_t n = 200001) {
  s.step = (hi - lo) / double(n - 1);
  s.x.resize(n);
  s.v.resize(n);
  for (std::size_t i = 0; i < n; ++i) s.x[i] = lo + double(i) * s.step;
  potential.evaluate(s.x.data(), s.v.data(), n, t);
  for (std::size_t i = 0; i < n; ++i)
    if (!std::isfinite(s.v[i]))
      throw PhysicsError("the potential is not finite at x = " + units(s.x[i], Dimension::length()) + " (value " +
                         fmt(s.v[i]) +
                         "): check formulas for division by zero or overflow");
}
Scan scan_potential(const Potential& potential, double lo, double hi, double t,
                    const MessageUnits& units = {}, std::size_t n = 200001) {
  Scan s;
  scan_potential(s, potential, lo, hi, t, units, n);
  return s;
}

// The WKB action S(E) = step sum_{V_i < E} sqrt(2 (E - V_i)) (hbar = m = 1) over samples of V; on
// sorted samples a pass stops at the first sample above E.
struct WkbAction {
  std::span<const double> v;
  double step = 0;
  bool sorted = false;
  double operator()(double energy) const {
    double sum = 0;
    for (double x : v) {
      if (x >= energy) {
        if (sorted) break;
        continue;
      }
      sum += std::sqrt(2 * (energy - x));
    }
    return sum * step;
  }
};

// The energy E in [a, b] with S(E) = pi (level + 1/2), given S(a) < target <= S(b), to
// 1e-12 (1 + |E|), by Boost.Math's TOMS 748 bracketing solver (Alefeld, Potra & Shi, ACM TOMS
// 21, 327 (1995)): about 10 passes over the samples per level where bisection took 35. (Newton
// steps stall here: the sum's derivative has a 1/sqrt peak at every sample.)
double wkb_solve(const WkbAction& action, int level, double a, double b, double fa, double fb) {
  const double target = si::pi * (level + 0.5);
  if (fb == 0) return b;
  auto f = [&](double e) { return action(e) - target; };
  auto close = [](double lo, double hi) { return hi - lo <= 1e-12 * (1 + std::abs(hi)); };
  std::uintmax_t iterations = 200;
  return boost::math::tools::toms748_solve(f, a, b, fa, fb, close, iterations).second;
}

// WKB energies of levels 0 .. count - 1 (sum p dx = pi (K + 1/2)) from one scan of V, each
// capped at the threshold (the lower end of the window). The highest is solved first on the
// unsorted samples; the others (unless only_highest: left at the threshold) on the samples
// below it, sorted once, each bracketed from the level below by steps of the last spacing.
std::vector<double> wkb_energies(const Scan& s, int count, bool only_highest = false) {
  const double threshold = std::min(s.v.front(), s.v.back());
  const double v_min = *std::min_element(s.v.begin(), s.v.end());
  const WkbAction all{s.v, s.step, false};
  const double top = all(threshold);
  std::vector<double> energies(std::size_t(std::max(count, 0)), threshold);
  // levels with pi (level + 1/2) > S(threshold) are not bound: they stay at the threshold
  const double below_threshold = std::ceil(top / si::pi - 0.5);  // may pass any int (a steep window)
  const int bound = below_threshold >= count ? count : int(below_threshold);
  if (bound <= 0) return energies;
  auto target = [](int level) { return si::pi * (level + 0.5); };
  const double highest = wkb_solve(all, bound - 1, v_min, threshold, -target(bound - 1), top - target(bound - 1));
  energies[std::size_t(bound - 1)] = highest;
  if (only_highest) return energies;
  std::vector<double> lower;  // the samples below the highest level, sorted
  for (double x : s.v)
    if (x < highest) lower.push_back(x);
  std::sort(lower.begin(), lower.end());
  const WkbAction below{lower, s.step, true};
  double a = v_min, spacing = 0;
  for (int level = 0; level + 1 < bound; ++level) {
    // S(highest) = target(bound - 1) to the solver's tolerance: above this level's target
    double fa = below(a) - target(level), b = highest, fb = target(bound - 1) - target(level);
    if (spacing > 0) {  // a bracket 1.5 spacings wide, moved up and doubled until it holds the level
      double width = 1.5 * spacing;
      while (a + width < highest) {
        const double x = a + width, f = below(x) - target(level);
        if (f >= 0) {
          b = x, fb = f;
          break;
        }
        a = x, fa = f, width *= 2;
      }
    }
    const double e = wkb_solve(below, level, a, b, fa, fb);
    spacing = level == 0 ? e - v_min : e - energies[std::size_t(level - 1)];
    energies[std::size_t(level)] = e;
    a = e;
  }
  return energies;
}

// wkb_energies through a memo, when there is one.
std::vector<double> memo_wkb(const Scan& s, int count, bool only_highest, SpectrumMemo* memo) {
  if (!memo) return wkb_energies(s, count, only_highest);
  const double lo = s.x.empty() ? 0.0 : s.x.front();
  if (auto found = memo->find_wkb(s.v, lo, s.step, count, only_highest)) return std::move(*found);
  std::vector<double> energies = wkb_energies(s, count, only_highest);
  memo->keep_wkb(s.v, lo, s.step, count, only_highest, energies);
  return energies;
}

std::pair<double, double> search_window(const SpectrumRequest& r) {
  if (r.box) return *r.box;
  return {r.search_centre - r.search_half_width, r.search_centre + r.search_half_width};
}

// Momentum margin beyond p0 such that the WKB decay integral in momentum space,
// int_{p0}^{p0+d} sqrt(p^2 - p0^2) dp / force, reaches `decay` (exact for an oscillator, where
// force = p0/x0 = omega).
double momentum_margin(double p0, double force, double decay) {
  auto integral = [&](double d) {
    const double p = p0 + d, s = std::sqrt(std::max(0.0, p * p - p0 * p0));
    return 0.5 * (p * s - p0 * p0 * std::log((p + s) / p0)) / force;
  };
  double lo = 0, hi = std::max(1.0, p0);
  while (integral(hi) < decay) hi *= 2;
  for (int i = 0; i < 100; ++i) {
    const double mid = 0.5 * (lo + hi);
    (integral(mid) < decay ? lo : hi) = mid;
  }
  return hi;
}

Grid with_points(const Grid& shape, double left, double right, double spacing) {
  // A count past 2^31 (or not finite) is no grid to solve on, and converting it to an integer is
  // undefined: a potential far too steep for its window (e.g. an absurd parameter value) ends here.
  const double count = std::ceil((right - left) / spacing);
  if (!(count >= 1 && count <= 2147483648.0))
    throw PhysicsError("the grid would need " + fmt(count) +
                       " points: the potential is far too steep for its window; check the trap's parameters");
  if (shape.boundary() == Boundary::hard_wall) {
    const auto n = fast_fft_size(std::size_t(count)) - 1;
    return Grid::box(left, right, n);
  }
  return Grid::periodic(left, right, fast_fft_size(std::size_t(count)));
}

}  // namespace

double effective_tolerance(const Grid& grid, const std::vector<double>& v, double requested) {
  double v_max = 0;
  for (double x : v) v_max = std::max(v_max, std::abs(x));
  return std::max(requested, 64 * std::numeric_limits<double>::epsilon() * (grid.max_kinetic() + v_max));
}

std::vector<int> degenerate_groups(const Eigen::VectorXd& energies, double tolerance) {
  std::vector<int> g(std::size_t(energies.size()), 0);
  for (Eigen::Index k = 1; k < energies.size(); ++k)
    g[k] = g[k - 1] + (energies(k) - energies(k - 1) > tolerance ? 1 : 0);
  return g;
}

namespace {
// Equal but for the level count (a spectrum of more levels serves fewer).
bool same_options(const SpectrumOptions& a, const SpectrumOptions& b) {
  return a.method == b.method && a.fd_order == b.fd_order && a.dense_limit == b.dense_limit &&
         a.residual_tolerance == b.residual_tolerance && a.refinement_sweeps == b.refinement_sweeps &&
         a.degeneracy_tolerance == b.degeneracy_tolerance;
}
bool same_grid(const Grid& a, const Grid& b) {
  return a.boundary() == b.boundary() && a.size() == b.size() && a.left() == b.left() && a.right() == b.right();
}
std::size_t bytes_of(const Spectrum& s) {
  return sizeof(double) * std::size_t(s.states.size() + s.energies.size());
}
}  // namespace

int hermite_basis_size(int levels) { return std::max(4 * levels + 60, 120); }

bool solves_dense(const SpectrumOptions& options, std::size_t points) {
  return options.method == EigenMethod::dense ||
         (options.method == EigenMethod::automatic && points <= options.dense_limit);
}

Spectrum lowest_levels(const Spectrum& s, int k) {
  TRAPWORK_EXPECT(k >= 1 && k <= s.energies.size(), "lowest_levels: 1 <= k <= levels held");
  if (k == s.energies.size()) return s;
  Spectrum out;
  out.grid = s.grid;
  out.energies = s.energies.head(k);
  out.states = s.states.leftCols(k);
  out.residuals.assign(s.residuals.begin(), s.residuals.begin() + k);
  out.group.assign(s.group.begin(), s.group.begin() + k);
  out.residual_tolerance = s.residual_tolerance;
  out.converged = int(std::count_if(out.residuals.begin(), out.residuals.end(),
                                    [&](double x) { return x < out.residual_tolerance; }));
  out.method = s.method;
  out.iterations = s.iterations;
  return out;
}

std::optional<Spectrum> SpectrumMemo::find(const Grid& grid, const std::vector<double>& v,
                                           const SpectrumOptions& options) const {
  const std::lock_guard<std::mutex> lock(mutex_);
  for (const Entry& e : entries_)
    if (same_grid(e.grid, grid) && same_options(e.options, options) && e.spectrum.energies.size() >= options.levels &&
        e.v == v) {
      ++reused_;
      return lowest_levels(e.spectrum, options.levels);
    }
  return std::nullopt;
}

void SpectrumMemo::keep(const Grid& grid, const std::vector<double>& v, const SpectrumOptions& options,
                        const Spectrum& s) {
  const std::size_t bytes = bytes_of(s);
  const std::lock_guard<std::mutex> lock(mutex_);
  ++solved_;
  if (bytes > budget_) return;
  // an entry of fewer levels for the same problem is served by this one from now on
  for (auto e = entries_.begin(); e != entries_.end();)
    if (same_grid(e->grid, grid) && same_options(e->options, options) &&
        e->spectrum.energies.size() <= s.energies.size() && e->v == v) {
      held_ -= bytes_of(e->spectrum);
      e = entries_.erase(e);
    } else {
      ++e;
    }
  while (held_ + bytes > budget_) {
    held_ -= bytes_of(entries_.front().spectrum);
    entries_.erase(entries_.begin());
  }
  SpectrumOptions o = options;
  o.memo.reset();
  entries_.push_back({grid, v, std::move(o), s});
  held_ += bytes;
}

std::optional<std::vector<double>> SpectrumMemo::find_wkb(const std::vector<double>& scan, double lo, double step,
                                                          int count, bool only_highest) const {
  const std::lock_guard<std::mutex> lock(mutex_);
  for (const WkbEntry& e : wkb_)
    if (e.lo == lo && e.step == step && e.scan == scan)
      for (const auto& [key, energies] : e.energies)
        if (key == std::make_pair(count, only_highest)) return energies;
  return std::nullopt;
}

void SpectrumMemo::keep_wkb(const std::vector<double>& scan, double lo, double step, int count, bool only_highest,
                            const std::vector<double>& energies) {
  const std::lock_guard<std::mutex> lock(mutex_);
  auto e = std::find_if(wkb_.begin(), wkb_.end(),
                        [&](const WkbEntry& w) { return w.lo == lo && w.step == step && w.scan == scan; });
  if (e == wkb_.end()) {
    if (wkb_.size() >= 8) wkb_.erase(wkb_.begin());
    wkb_.push_back({scan, lo, step, {}});
    e = std::prev(wkb_.end());
  }
  e->energies.push_back({{count, only_highest}, energies});
  wkb_levels_ += only_highest ? 1 : std::size_t(std::max(count, 0));
}

std::size_t SpectrumMemo::wkb_levels() const {
  const std::lock_guard<std::mutex> lock(mutex_);
  return wkb_levels_;
}

std::size_t SpectrumMemo::solved() const {
  const std::lock_guard<std::mutex> lock(mutex_);
  return solved_;
}

std::size_t SpectrumMemo::reused() const {
  const std::lock_guard<std::mutex> lock(mutex_);
  return reused_;
}

Spectrum solve_spectrum(const Grid& grid, const std::vector<double>& v, const SpectrumOptions& options) {
  if (options.memo) {
    if (auto found = options.memo->find(grid, v, options)) return std::move(*found);
    SpectrumOptions plain = options;
    plain.memo.reset();
    // more levels at once when asked for (at most half the points: what the grid resolves)
    plain.levels = std::max(options.levels, std::min(options.memo_levels, int(grid.size()) / 2));
    Spectrum s = solve_spectrum(grid, v, plain);
    options.memo->keep(grid, v, plain, s);
    return lowest_levels(s, options.levels);
  }
  const int n = int(grid.size()), k = options.levels;
  TRAPWORK_EXPECT(int(v.size()) == n, "solve_spectrum: potential samples do not match the grid");
  if (k < 1 || k > n / 2)
    throw PhysicsError("asked for " + std::to_string(k) + " levels on a grid of " + std::to_string(n) +
                       " points: at most half the points can be resolved levels; use more points");
  EigenMethod method = options.method;
  if (method == EigenMethod::automatic)
    method = solves_dense(options, grid.size()) ? EigenMethod::dense : EigenMethod::lanczos;
  if (method == EigenMethod::hermite)
    throw ContractViolation("solve_spectrum: the Hermite basis is handled by compute_spectrum");
  const CostEstimate cost = spectrum_cost(grid.size(), k, method == EigenMethod::dense, options.fd_order);
  check_memory(cost, options.memory_limit, "refused before computing");
  if (options.on_estimate) options.on_estimate(cost);

  Spectrum s;
  s.grid = grid;
  s.residual_tolerance = effective_tolerance(grid, v, options.residual_tolerance);
  const double tolerance = s.residual_tolerance;
  const std::string basis = grid.boundary() == Boundary::periodic ? "Fourier" : "sine";
  Eigen::MatrixXd images;
  if (method == EigenMethod::dense) {
    Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(dense_hamiltonian(grid, v));
    if (eig.info() != Eigen::Success) throw PhysicsError("dense eigensolver did not converge");
    s.energies = eig.eigenvalues().head(k);
    s.states = eig.eigenvectors().leftCols(k);
    s.method = "dense " + basis + " grid";
    KineticOperator kinetic(grid, k);
    apply_hamiltonian(kinetic, v, s.states, images);
  } else {
    const Eigen::SparseMatrix<double> h = finite_difference_hamiltonian(grid, v, options.fd_order);
    const int extra = std::max(4, k / 4);
    const int nev = std::min(k + extra, n - 2);
    // Shift-invert converges in a few restarts, so a subspace 1.5 nev wide is enough and
    // keeps memory near the states themselves (2 nev is the usual default).
    const int ncv = std::min(n - 1, nev + std::max(20, nev / 2));
    const double sigma = *std::min_element(v.begin(), v.end()) - 1.0;
    Eigen::VectorXd values;
    Eigen::MatrixXd vectors;
    {  // scoped so the Lanczos basis is freed before the refinement
      ShiftInvert op(h, options.interrupt);
      Spectra::SymEigsShiftSolver<ShiftInvert> eigs(op, nev, ncv, sigma);
      eigs.init();
      eigs.compute(Spectra::SortRule::LargestMagn, 1000, 1e-12, Spectra::SortRule::SmallestAlge);
      if (eigs.info() != Spectra::CompInfo::Successful)
        throw PhysicsError("shift-invert Lanczos did not converge for " + std::to_string(nev) +
                           " levels; try fewer levels or method = \"dense\"");
      s.iterations = int(eigs.num_iterations());
      values = eigs.eigenvalues();
      vectors = eigs.eigenvectors();
    }
    s.method = "shift-invert Lanczos, finite differences of order " + std::to_string(options.fd_order);
    if (method == EigenMethod::finite_difference) {
      s.energies = values.head(k);
      s.states = vectors.leftCols(k);
      images = h * s.states;
    } else {
      // Refine against the pseudo-spectral H: Rayleigh-Ritz in the span of the current vectors
      // and their corrections (H_fd - theta_i)^{-1} r_i, a Davidson step whose preconditioner is
      // the finite-difference H at the Ritz value (Davidson, J. Comput. Phys. 17, 87 (1975);
      // Olsen, Jorgensen & Simons, Chem. Phys. Lett. 169, 463 (1990); from memory). To first
      // order in H - H_fd this is the perturbative correction, so each sweep gains that order.
      Ritz ritz = rayleigh_ritz(grid, v, vectors, nev);
      int sweep = 0;
      for (; sweep < options.refinement_sweeps; ++sweep) {
        const Eigen::VectorXd r = residual_norms(ritz.vectors, ritz.images, ritz.values);
        std::vector<int> open;
        for (int i = 0; i < nev; ++i)
          if (r(i) >= 0.1 * tolerance) open.push_back(i);
        if (r.head(k).maxCoeff() < tolerance || open.empty()) break;
        Eigen::MatrixXd corrections(n, Eigen::Index(open.size()));
        if (options.interrupt) options.interrupt();
        ShiftInvert near(h, options.interrupt);
        for (std::size_t c = 0; c < open.size(); ++c) {
          const int i = open[c];
          near.set_shift(ritz.values(i));
          corrections.col(Eigen::Index(c)) = near.solve(ritz.images.col(i) - ritz.values(i) * ritz.vectors.col(i));
        }
        const Eigen::MatrixXd extra = orthonormal_complement(ritz.vectors, std::move(corrections));
        Eigen::MatrixXd basis_vectors(n, nev + extra.cols());
        basis_vectors << ritz.vectors, extra;
        ritz = rayleigh_ritz(grid, v, basis_vectors, nev);
      }
      s.iterations += sweep;
      s.energies = ritz.values.head(k);
      s.states = ritz.vectors.leftCols(k);
      images = ritz.images.leftCols(k);
      s.method += " + " + basis + " Rayleigh-Ritz (" + std::to_string(sweep) + " sweeps)";
    }
  }
  const Eigen::VectorXd r = residual_norms(s.states, images, s.energies);
  s.residuals.assign(r.data(), r.data() + r.size());
  s.converged = int(std::count_if(s.residuals.begin(), s.residuals.end(), [&](double x) { return x < tolerance; }));
  s.states /= std::sqrt(grid.spacing());  // columns had unit Euclidean norm
  fix_signs(grid, s.states);
  s.group = degenerate_groups(s.energies, options.degeneracy_tolerance);
  return s;
}

namespace {
HarmonicApproximation harmonic_from_scan(const Potential& potential, const Scan& s, double t) {
  const std::size_t i = std::min_element(s.v.begin(), s.v.end()) - s.v.begin();
  HarmonicApproximation h{s.x[i], s.v[i], 0};
  // Parabolic refinement of the minimum from the three samples around it.
  if (i > 0 && i + 1 < s.x.size()) {
    const double a = s.v[i - 1], b = s.v[i], c = s.v[i + 1], den = a - 2 * b + c;
    if (den > 0) h.x_min = s.x[i] + 0.5 * s.step * (a - c) / den;
    const double step = 0.1 * s.step;
    const double vm = potential(h.x_min, t), vl = potential(h.x_min - step, t), vr = potential(h.x_min + step, t);
    h.v_min = std::min(vm, b);
    const double curvature = (vl - 2 * vm + vr) / (step * step);
    // Flatter than quadratic (a pure quartic) gives a curvature at the level of rounding.
    if (curvature > 1e-6) h.omega = std::sqrt(curvature);
  }
  return h;
}
}  // namespace

HarmonicApproximation harmonic_approximation(const Potential& potential, double lo, double hi) {
  const double t = potential.time();  // formulas using t at the potential's own time
  return harmonic_from_scan(potential, scan_potential(potential, lo, hi, t), t);
}

std::vector<double> wkb_level_energies(const Potential& potential, int count, double lo, double hi,
                                       const std::shared_ptr<SpectrumMemo>& memo) {
  const double t = potential.time();  // formulas using t at the potential's own time
  return memo_wkb(scan_potential(potential, lo, hi, t), count, false, memo.get());
}

namespace {
// choose_grids on the potential's scan over the search window (compute_spectrum has it already).
Grid grid_from_scan(const Scan& s, double energy_max, const SpectrumRequest& request) {
  const MessageUnits& units = request.message_units;
  const double v_min = *std::min_element(s.v.begin(), s.v.end());
  if (!(energy_max > v_min))
    throw PhysicsError("no states below E = " + units(energy_max, Dimension::energy()) +
                       ": the potential's minimum in the search window is " + units(v_min, Dimension::energy()));
  const std::size_t n = s.x.size();
  std::size_t a = 0, b = n - 1;
  while (a < n && s.v[a] >= energy_max) ++a;
  while (b > a && s.v[b] >= energy_max) --b;
  // Beyond each turning point, continue until the WKB decay integral reaches `decay`; where
  // the potential stays below energy_max up to the window's edge (finite depth), stop where
  // it has settled to its asymptote and add the width of the well again.
  auto extend = [&](std::size_t from, int dir) -> double {
    double action = 0;
    for (std::size_t i = from; i < n; i += std::size_t(dir)) {
      if (s.v[i] > energy_max) action += std::sqrt(2 * (s.v[i] - energy_max)) * s.step;
      if (action >= request.decay) return s.x[i];
      if ((dir < 0 && i == 0) || (dir > 0 && i == n - 1)) break;
    }
    return dir < 0 ? s.x.front() : s.x.back();
  };
  double left = extend(a, -1), right = extend(b, +1);
  const bool open_left = a == 0 || left == s.x.front(), open_right = b == n - 1 || right == s.x.back();
  // The well proper: between the turning points on confining sides; on open (finite-depth)
  // sides, out to where V has settled to its asymptote within 1e-6 of the well's depth.
  std::size_t ia = a, ib = b;
  const double depth = std::min(s.v.front(), s.v.back()) - v_min;
  if (open_left) for (ia = 0; ia < n && std::abs(s.v[ia] - s.v.front()) < 1e-6 * depth;) ++ia;
  if (open_right) for (ib = n - 1; ib > ia && std::abs(s.v[ib] - s.v.back()) < 1e-6 * depth;) --ib;
  const double width = std::max(s.x[ib] - s.x[ia], 4 * s.step);
  if (!request.box && open_left) left = std::max(s.x.front(), s.x[ia] - width);
  if (!request.box && open_right) right = std::min(s.x.back(), s.x[ib] + width);
  if (request.box) std::tie(left, right) = *request.box;
  // Spacing: the largest momentum p0 = sqrt(2 (E_max - V_min)) plus the WKB margin of its
  // momentum-space tail, with the force scale p0 / (half-width of the allowed region).
  const double p0 = std::sqrt(2 * (energy_max - v_min));
  const double half_width = 0.5 * width;
  const double k_needed = p0 + momentum_margin(p0, p0 / half_width, request.decay);
  const double spacing = si::pi / k_needed;
  Grid shape = request.box ? Grid::box(left, right, 4) : Grid::periodic(left, right, 4);
  return with_points(shape, left, right, spacing);
}
}  // namespace

std::vector<Grid> choose_grids(const std::vector<Potential>& potentials, double energy_max,
                               const SpectrumRequest& request) {
  const auto [lo, hi] = search_window(request);
  Scan scan;
  std::vector<Grid> grids;
  for (const Potential& p : potentials) {
    scan_potential(scan, p, lo, hi, p.time(), request.message_units);  // formulas at the potential's own time
    grids.push_back(grid_from_scan(scan, energy_max, request));
  }
  return grids;
}

std::vector<Level> analyse_levels(const Spectrum& s, const HarmonicApproximation& harmonic, double threshold) {
  const Grid& g = s.grid;
  const auto x = g.points();
  const Eigen::Map<const Eigen::VectorXd> xv(x.data(), Eigen::Index(x.size()));
  const Eigen::Index n = Eigen::Index(x.size()), edge = std::min<Eigen::Index>(4, n);
  std::vector<Level> levels(std::size_t(s.energies.size()));
  for (Eigen::Index k = 0; k < s.energies.size(); ++k) {
    Level& l = levels[k];
    const Eigen::VectorXd density = s.states.col(k).array().square();
    l.energy = s.energies(k);
    l.spacing = k + 1 < s.energies.size() ? s.energies(k + 1) - s.energies(k) : std::nan("");
    l.mean_x = density.dot(xv) * g.spacing();
    l.mean_x2 = density.dot(xv.cwiseProduct(xv)) * g.spacing();
    l.harmonic_shift = harmonic.omega > 0 ? l.energy - (harmonic.v_min + harmonic.omega * (double(k) + 0.5)) : std::nan("");
    l.group = s.group[k];
    l.residual = s.residuals[k];
    if (g.boundary() == Boundary::periodic)
      l.edge_amplitude = std::max(density.head(edge).maxCoeff(), density.tail(edge).maxCoeff()) / density.maxCoeff();
    l.bound = l.energy < threshold && l.edge_amplitude < 1e-6;
  }
  return levels;
}

namespace {

// Polynomial coefficients c_0..c_8 of V about `centre`, when every term is harmonic or
// polynomial (binomial re-expansion of each term about the common centre).
std::optional<std::vector<double>> polynomial_coefficients(const Potential& potential, double centre) {
  std::vector<double> c(9, 0.0);
  static const char* names[] = {"cubic", "quartic", "quintic", "sextic", "septic", "octic"};
  for (const auto& term : potential.terms()) {
    if (term.shape() != Shape::harmonic && term.shape() != Shape::polynomial) return std::nullopt;
    std::vector<double> own(9, 0.0);
    const double w = term.parameter("frequency");
    own[2] = 0.5 * w * w;
    if (term.shape() == Shape::polynomial) {
      own[1] = term.parameter("linear");
      for (int j = 3; j <= 8; ++j) own[j] = term.parameter(names[j - 3]);
    }
    // (y + d)^j with y = x - centre, d = centre - c_term.
    const double d = centre - term.parameter("centre");
    for (int j = 0; j <= 8; ++j) {
      double binom = 1;
      for (int i = 0; i <= j; ++i) {
        c[i] += own[j] * binom * std::pow(d, j - i);
        binom = binom * double(j - i) / double(i + 1);
      }
    }
  }
  return c;
}

Spectrum hermite_spectrum(const Potential& potential, const HarmonicApproximation& harmonic, const Grid& grid,
                          const std::vector<double>& v, const SpectrumOptions& options) {
  const auto coefficients = polynomial_coefficients(potential, harmonic.x_min);
  if (!coefficients)
    throw PhysicsError("method = \"hermite\" needs a potential made only of harmonic and polynomial terms");
  if ((*coefficients)[8] < 0 || ((*coefficients)[8] == 0 && (*coefficients)[7] == 0 && (*coefficients)[6] < 0))
    throw PhysicsError("method = \"hermite\": the polynomial does not confine (negative leading coefficient)");
  HermiteBasis basis{harmonic.omega > 0 ? harmonic.omega : 1.0, harmonic.x_min, hermite_basis_size(options.levels)};
  // Cost before commitment: a dense eigensolve of the basis, and the basis functions and states
  // sampled on the grid.
  CostEstimate cost = spectrum_cost(std::size_t(basis.size), options.levels, true);
  cost.bytes += sizeof(double) * double(grid.size()) * double(basis.size + 2 * options.levels);
  cost.what = "a spectrum of " + std::to_string(options.levels) + " levels in a Hermite basis of " +
              std::to_string(basis.size) + " functions on " + std::to_string(grid.size()) + " points";
  cost.change = "ask for fewer levels ([spectrum] levels)";
  check_memory(cost, options.memory_limit, "refused before computing");
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(hermite_hamiltonian(basis, *coefficients));
  Spectrum s;
  s.grid = grid;
  const int k = options.levels;
  s.energies = eig.eigenvalues().head(k);
  const Eigen::MatrixXd functions = hermite_functions(basis, grid.points(), basis.size);
  s.states = functions * eig.eigenvectors().leftCols(k);
  for (int j = 0; j < k; ++j) s.states.col(j) /= s.states.col(j).norm();
  KineticOperator kinetic(grid, k);
  Eigen::MatrixXd images;
  apply_hamiltonian(kinetic, v, s.states, images);
  const Eigen::VectorXd r = residual_norms(s.states, images, s.energies);
  s.residuals.assign(r.data(), r.data() + r.size());
  s.residual_tolerance = effective_tolerance(grid, v, options.residual_tolerance);
  s.converged = int(std::count_if(s.residuals.begin(), s.residuals.end(),
                                  [&](double x) { return x < s.residual_tolerance; }));
  s.states /= std::sqrt(grid.spacing());
  fix_signs(grid, s.states);
  s.group = degenerate_groups(s.energies, options.degeneracy_tolerance);
  s.method = "Hermite basis of " + std::to_string(basis.size) + " functions (states sampled on the grid)";
  return s;
}

Spectrum solve_on(const Potential& potential, const HarmonicApproximation& harmonic, const Grid& grid,
                  const SpectrumOptions& options, double t, double cutoff, const MessageUnits& units) {
  std::vector<double> v = potential.evaluate(grid.points(), t);
  for (std::size_t j = 0; j < v.size(); ++j)
    if (!std::isfinite(v[j]))
      throw PhysicsError("the potential is not finite at x = " + units(grid.x(j), Dimension::length()));
  cap_potential(v, harmonic.v_min, cutoff);
  if (options.method == EigenMethod::hermite) return hermite_spectrum(potential, harmonic, grid, v, options);
  return solve_spectrum(grid, v, options);
}

}  // namespace

SpectrumResult compute_spectrum(const Potential& potential, const SpectrumRequest& request) {
  const double t = potential.time();  // formulas using t at the potential's own time
  SpectrumResult result;
  const auto [lo, hi] = search_window(request);
  const MessageUnits& units = request.message_units;
  const Scan s = scan_potential(potential, lo, hi, t, units);
  result.harmonic = harmonic_from_scan(potential, s, t);
  const std::size_t lowest = std::min_element(s.v.begin(), s.v.end()) - s.v.begin();
  if (!request.box && (lowest == 0 || lowest + 1 == s.v.size()))
    throw PhysicsError("the potential does not confine: its lowest value in the search window from " +
                       units(lo, Dimension::length()) + " to " + units(hi, Dimension::length()) +
                       " is at the window's edge (V = " + units(s.v[lowest], Dimension::energy()) +
                       "); check signs and coefficients, or set the search window ([grid] search_half_width)");
  const double edge_min = std::min(s.v.front(), s.v.back());
  const int k = request.options.levels;
  // A level is bound below the lower asymptote; for a box or a confining trap there is none.
  const double top_estimate = memo_wkb(s, k, true, request.options.memo.get()).back();
  result.finite_depth = !request.box && top_estimate >= edge_min;
  result.threshold = result.finite_depth ? edge_min : inf;
  double cutoff = result.harmonic.v_min + 1.25 * (top_estimate - result.harmonic.v_min) + 1e-12;
  if (request.box) {  // box levels are at least the free-particle ones
    const double l = request.box->second - request.box->first;
    cutoff = std::max(cutoff, result.harmonic.v_min + 1.25 * std::pow((k + 1) * si::pi / l, 2) / 2);
  }

  // What the request fixes stays fixed: a given extent (or box) keeps its walls, given points
  // keep their number; the rest is chosen here and adapted below.
  const bool auto_spacing = !request.points, auto_extent = !request.extent && !request.box;
  auto make_grid = [&](double energy_max) {
    Grid g = grid_from_scan(s, energy_max, request);
    if (request.extent) g = with_points(g, request.extent->first, request.extent->second, g.spacing());
    if (request.points)
      g = request.box ? Grid::box(g.left(), g.right(), *request.points) : Grid::periodic(g.left(), g.right(), *request.points);
    // At most half the points are resolved levels: a low WKB guess (a flat-bottomed trap) must
    // not leave fewer than 2k + 8; the raised cutoff below then refines further.
    else if (g.size() < std::size_t(2 * k + 8))
      g = with_points(g, g.left(), g.right(), g.length() / double(2 * k + 8));
    return g;
  };
  std::optional<Grid> grid = make_grid(cutoff);

  // Automatic grids are adapted: a higher cutoff when the top level lies above the one the
  // grid was made for, a wider grid while a bound state reaches its edge, a finer one while
  // the energies still change on a finer, wider grid.
  int widened = 0, refined = 0, raised = 0;
  for (;;) {
    result.spectrum = solve_on(potential, result.harmonic, *grid, request.options, t, cutoff, units);
    result.energy_cutoff = cutoff;
    result.levels = analyse_levels(result.spectrum, result.harmonic, result.threshold);
    const Grid& g = result.spectrum.grid;
    const double top = result.spectrum.energies(k - 1);
    if (auto_spacing && !result.finite_depth && top > cutoff && raised < 3) {
      ++raised;
      cutoff = result.harmonic.v_min + 1.25 * (top - result.harmonic.v_min);  // the WKB guess was low
      grid = make_grid(cutoff);
      continue;
    }
    const bool touching = std::any_of(result.levels.begin(), result.levels.end(), [&](const Level& l) {
      return l.energy < result.threshold && l.edge_amplitude > request.edge_tolerance;
    });
    if (auto_extent && auto_spacing && touching && widened < 3) {
      ++widened;
      // Widen the sides that are open (finite depth), or both for a confining trap.
      const bool left_open = s.v.front() <= result.threshold, right_open = s.v.back() <= result.threshold;
      const bool both = !left_open && !right_open;
      const double left = (left_open || both) ? g.left() - g.length() : g.left();
      const double right = (right_open || both) ? g.right() + g.length() : g.right();
      grid = with_points(g, std::max(left, lo), std::min(right, hi), g.spacing());
      continue;
    }
    result.convergence = GridConvergence{};
    if (!request.convergence_check) break;
    const double centre = 0.5 * (g.left() + g.right()), half = 0.5 * g.length();
    const Grid finer = request.box ? with_points(g, g.left(), g.right(), 0.8 * g.spacing())
                                   : with_points(g, centre - 1.2 * half, centre + 1.2 * half, 0.8 * g.spacing());
    const Spectrum fine = solve_on(potential, result.harmonic, finer, request.options, t, cutoff, units);
    result.convergence.done = true;
    result.convergence.finer = finer;
    for (int j = 0; j < k; ++j) {
      const double d = std::abs(fine.energies(j) - result.spectrum.energies(j));
      result.convergence.energy_change.push_back(d);
      if (result.levels[j].energy < result.threshold) result.convergence.max_energy_change = std::max(result.convergence.max_energy_change, d);
    }
    if (auto_spacing && result.convergence.max_energy_change > request.energy_tolerance && refined < 4) {
      ++refined;
      grid = with_points(g, g.left(), g.right(), 0.7 * g.spacing());
      continue;
    }
    break;
  }
  result.adaptations = {raised, widened, refined};

  // Warnings, each with its diagnostic value and what to change.
  int unbound = 0;
  double worst_edge = 0, worst_residual = 0;
  for (const auto& l : result.levels) {
    if (!l.bound) ++unbound;
    if (l.energy < result.threshold) worst_edge = std::max(worst_edge, l.edge_amplitude);
    worst_residual = std::max(worst_residual, l.residual);
  }
  if (unbound > 0)
    result.warnings.push_back(std::to_string(unbound) + " of " + std::to_string(k) +
                              " levels lie above the potential's threshold " + units(result.threshold, Dimension::energy()) +
                              " and are not bound: they are discretised continuum states whose energies depend on the grid extent");
  if (worst_edge > request.edge_tolerance)
    result.warnings.push_back("a bound state reaches the grid edge (relative density " + fmt(worst_edge) +
                              " on the outermost grid points): widen the grid ([grid] left/right)");
  if (worst_residual > result.spectrum.residual_tolerance && request.options.method != EigenMethod::hermite)
    result.warnings.push_back("largest eigenpair residual " + units(worst_residual, Dimension::energy()) +
                              " exceeds the tolerance " + units(result.spectrum.residual_tolerance, Dimension::energy()) +
                              ": use more points or method = \"dense\"");
  const double scale = std::max(1.0, std::abs(result.spectrum.energies(k - 1) - result.harmonic.v_min));
  if (result.convergence.done && result.convergence.max_energy_change > request.energy_tolerance * scale)
    result.warnings.push_back("energies change by up to " + units(result.convergence.max_energy_change, Dimension::energy()) +
                              " on a finer, wider grid: the spectrum is not converged; use more points");
  return result;
}

}  // namespace trapwork

namespace trapwork {
void cap_potential(std::vector<double>& v, double v_min, double cutoff) {
  const double cap = v_min + 1e4 * std::max(cutoff - v_min, 1e-300);
  for (double& x : v) x = std::min(x, cap);
}
}  // namespace trapwork
