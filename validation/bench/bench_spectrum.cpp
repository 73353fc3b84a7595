// Benchmark (not a test): the lowest 50 and 200 levels of an anharmonic trap on Fourier grids
// of 2^14 to 2^20 points by shift-invert Lanczos with Rayleigh-Ritz refinement. Each case runs
// in a child process so that its peak memory (ru_maxrss) is its own. Prints a table with the
// growth exponent of time and memory against N between successive sizes.
//
//   build/validation/bench_spectrum [min_log2=14] [max_log2=20] [K=50,200]
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <vector>

#include "solver/spectrum.hpp"

using namespace trapwork;

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
      int pipe_fd[2];
      if (pipe(pipe_fd) != 0) return 1;
      const pid_t child = fork();
      if (child == 0) {
        close(pipe_fd[0]);
        const Grid g = Grid::periodic(-40, 40, n);
        SpectrumOptions o;
        o.levels = levels;
        o.method = EigenMethod::lanczos;
        const auto t0 = std::chrono::steady_clock::now();
        const Spectrum s = solve_spectrum(g, trap.evaluate(g.points()), o);
        const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
        double worst = 0;
        for (double r : s.residuals) worst = std::max(worst, r);
        const double out[3] = {seconds, worst, s.energies(levels - 1)};
        if (write(pipe_fd[1], out, sizeof out) != sizeof out) _exit(1);
        _exit(0);
      }
      close(pipe_fd[1]);
      double in[3] = {NAN, NAN, NAN};
      const bool got = read(pipe_fd[0], in, sizeof in) == sizeof in;
      close(pipe_fd[0]);
      int status = 0;
      rusage usage{};
      wait4(child, &status, 0, &usage);
      const double mem = double(usage.ru_maxrss) / 1024.0;  // KiB -> MiB
      if (!got) {
        std::printf("%6d %9zu   failed (status %d)\n", levels, n, status);
        continue;
      }
      const double tg = last_time > 0 ? std::log2(in[0] / last_time) : NAN;
      const double mg = last_mem > 0 ? std::log2(mem / last_mem) : NAN;
      std::printf("%6d %9zu %10.3f %11.1f %9.2f %9.2f %11.2e %12.8f\n", levels, n, in[0], mem, tg, mg, in[1], in[2]);
      std::fflush(stdout);
      last_time = in[0];
      last_mem = mem;
    }
  }
}
