#include "solver/cost.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "solver/errors.hpp"

namespace trapwork {

namespace {
constexpr double real_bytes = 8, complex_bytes = 16;

std::string count_text(double n) {
  char text[32];
  std::snprintf(text, sizeof text, "%.0f", n);
  return text;
}
}  // namespace

std::string bytes_text(double bytes) {
  const char* units[] = {"B", "kB", "MB", "GB", "TB", "PB"};
  int u = 0;
  while (bytes >= 1000 && u < 5) bytes /= 1000, ++u;
  char text[32];
  std::snprintf(text, sizeof text, bytes < 10 ? "%.1f %s" : "%.0f %s", bytes, units[u]);
  return text;
}

CostEstimate spectrum_cost(std::size_t points, int levels, bool dense, int fd_order) {
  const double n = double(points), k = std::max(1, levels);
  CostEstimate c;
  if (dense) {
    c.bytes = 3 * n * n * real_bytes;
    c.operations = 9 * n * n * n;
  } else {
    const double nev = k + std::max(4.0, k / 4), ncv = nev + std::max(20.0, nev / 2);
    c.bytes = n * (2 * ncv + 4 * k + 4.0 * fd_order + 2) * real_bytes;
    // restarts of ncv vectors (orthogonalisation n ncv^2, solves n fd_order ncv) and the
    // refinement sweeps (transforms of the 2 nev vectors, Rayleigh-Ritz n (2 nev)^2)
    c.operations = 4 * n * ncv * ncv + 8 * n * (2 * nev) * (2 * nev + 10 * std::log2(std::max(n, 2.0)));
  }
  c.what = "a spectrum of " + std::to_string(levels) + " levels on " + count_text(n) + " points (" +
           (dense ? "dense" : "Lanczos") + ")";
  c.change = "ask for fewer levels ([spectrum] levels, [work] max_initial_levels or final_margin) or fewer points "
             "([grid] points)";
  return c;
}

CostEstimate work_cost(const WorkSizes& s) {
  const double n = double(s.points);
  const double states = s.spectra * n * s.levels * real_bytes;
  const double propagated = 2 * n * s.kept * complex_bytes;
  const double basis = s.basis_levels > 0 ? 3 * n * s.basis_levels * real_bytes : 0;
  const CostEstimate solve = spectrum_cost(s.points, s.levels, s.dense);
  CostEstimate c;
  c.bytes = states + propagated + basis + solve.bytes;
  const double substep = 2 * 5 * n * std::log2(std::max(n, 2.0)) + 3 * 6 * n;
  c.operations = s.runs * double(s.steps) * s.substeps * s.kept * substep;
  c.what = std::to_string(s.spectra) + " spectra of " + std::to_string(s.levels) + " levels and " +
           std::to_string(s.kept) + " propagated states on " + count_text(n) + " points";
  c.change = "use fewer points ([grid] points) or fewer levels ([work] max_initial_levels, final_margin, "
             "[spectrum] levels; a lower temperature keeps fewer)";
  return c;
}

int automatic_steps(double duration_times_rate, double phase_per_step) {
  constexpr double most = 1e9;
  const double wanted = std::ceil(duration_times_rate / phase_per_step);
  if (!(wanted <= most)) {
    char text[320];
    std::snprintf(
        text, sizeof text,
        "the protocol needs about %.3g split-operator steps (its duration times the energy range in "
        "use, at %g rad of phase per step), more than the %.0e a run may take: shorten [protocol] "
        "duration, or set [work] steps (the half-step check then measures their error)",
        wanted, phase_per_step, most);
    throw PhysicsError(text);
  }
  return std::max(16, int(wanted));
}

CostEstimate plan_cost(double largest_runs, double draws, std::size_t lines) {
  CostEstimate c;
  c.bytes = largest_runs * real_bytes;
  c.operations = draws * (250 + std::log2(std::max<double>(2, double(lines))));
  c.what = "one synthetic experiment of " + count_text(largest_runs) + " runs";
  c.change = "lower --runs (or --synthetic-runs)";
  return c;
}

void check_memory(const CostEstimate& e, double limit_bytes, const std::string& context) {
  if (!(limit_bytes > 0) || !(e.bytes > limit_bytes)) return;
  throw PhysicsError(context + ": " + e.what + " needs about " + bytes_text(e.bytes) + " of memory, more than the " +
                     bytes_text(limit_bytes) + " available: " + e.change);
}

}  // namespace trapwork
