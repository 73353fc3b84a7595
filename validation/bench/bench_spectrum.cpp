// Benchmark (not a test): the lowest 50 and 200 levels of an anharmonic trap on Fourier grids
// of 2^14 to 2^20 points by shift-invert Lanczos with Rayleigh-Ritz refinement. Each case runs
// in a child process so that its peak memory (ru_maxrss) is its own. Prints a table with the
// growth exponent of time and memory against N between successive sizes (harness.hpp).
//
//   build/validation/bench_spectrum [min_log2=14] [max_log2=20] [K=50,200]
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <vector>

#include "solver/spectrum.hpp"
#include "harness.hpp"

using namespace trapwork;
using namespace trapwork_bench;

int main(int argc, char** argv) {
  const int lo = argc > 1 ? std::atoi(argv[1]) : 14, hi = argc > 2 ? std::atoi(argv[2]) : 20;
  // A 1 MHz trap with a small quartic term, in oscillator units (omega = 1).
  const Potential trap({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 2e-3}})});
  std::printf("# lowest K levels of p^2/2 + x^2/2 + 2e-3 x^4 on [-40, 40); method: shift-invert Lanczos (FD-8) + Fourier Rayleigh-Ritz\n");
  std::printf("%6s %9s %10s %11s %9s %9s %11s %12s\n", "K", "N", "time_s", "peak_MiB", "t_growth", "m_growth",
              "max_resid", "E_K-1");
  std::vector<int> level_counts;
  for (const char* p = argc > 3 ? argv[3] : "50,200"; *p;) {
    char* end = nullptr;
    level_counts.push_back(int(std::strtol(p, &end, 10)));
    p = *end == ',' ? end + 1 : end;
  }
  for (int levels : level_counts) {
    double last_time = 0, last_mem = 0;
    for (int p = lo; p <= hi; ++p) {
      const std::size_t n = std::size_t(1) << p;
      const Measurement m = in_child([&] {
        const Grid g = Grid::periodic(-40, 40, n);
        SpectrumOptions o;
        o.levels = levels;
        o.method = EigenMethod::lanczos;
        Stopwatch clock;
        const Spectrum s = solve_spectrum(g, trap.evaluate(g.points()), o);
        double worst = 0;
        for (double r : s.residuals) worst = std::max(worst, r);
        return clock.result({worst, s.energies(levels - 1)});
      });
      if (!m.ok || m.values.size() != 2) {
        std::printf("%6d %9zu   failed\n", levels, n);
        continue;
      }
      const double in[3] = {m.wall_s, m.values[0], m.values[1]};
      const double mem = m.peak_mib;
      const double tg = last_time > 0 ? std::log2(in[0] / last_time) : NAN;
      const double mg = last_mem > 0 ? std::log2(mem / last_mem) : NAN;
      std::printf("%6d %9zu %10.3f %11.1f %9.2f %9.2f %11.2e %12.8f\n", levels, n, in[0], mem, tg, mg, in[1], in[2]);
      std::fflush(stdout);
      last_time = in[0];
      last_mem = mem;
    }
  }
}
