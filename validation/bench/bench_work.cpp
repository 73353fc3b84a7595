// Benchmark (not a test): the propagation behind a thermal anharmonic translation with a few
// hundred initial states on 2048 points, 2*10^4 Strang steps, with 1 and 2 FFTW threads, and the
// FFT-only floor of the same job (the batch transforms alone, same plans' shape and flags).
// Each case runs in its own process so that its peak memory is its own.
//
//   build/validation/bench_work [states=300] [steps=20000]
#include <fftw3.h>
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <functional>

#include "solver/propagator.hpp"

using namespace trapwork;

namespace {

struct Measurement {
  double seconds = NAN, mib = NAN;
};

// Runs job() in a child process; returns its wall time (reported by the child) and peak RSS.
Measurement in_child(const std::function<double()>& job) {
  int fd[2];
  if (pipe(fd) != 0) return {};
  const pid_t child = fork();
  if (child == 0) {
    close(fd[0]);
    const double s = job();
    if (write(fd[1], &s, sizeof s) != sizeof s) _exit(1);
    _exit(0);
  }
  close(fd[1]);
  Measurement m;
  if (read(fd[0], &m.seconds, sizeof m.seconds) != sizeof m.seconds) m.seconds = NAN;
  close(fd[0]);
  int status = 0;
  rusage usage{};
  wait4(child, &status, 0, &usage);
  m.mib = double(usage.ru_maxrss) / 1024.0;
  return m;
}

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

}  // namespace

int main(int argc, char** argv) {
  const int states = argc > 1 ? std::atoi(argv[1]) : 300;
  const int steps = argc > 2 ? std::atoi(argv[2]) : 20000;
  const std::size_t n = 2048;
  // A trap with a small quartic term moved by 10 oscillator lengths in 2.5 periods (oscillator
  // units), co-moving frame; the initial states are the Hermite functions of its harmonic part
  // (the cost of propagation does not depend on which states are propagated).
  const Potential trap({Term("trap", Shape::polynomial, {{"frequency", 1.0}, {"quartic", 1e-3}})});
  const double tau = 2.5 * 2 * M_PI;
  const Protocol protocol(tau, {Schedule::linear("trap.centre", 0.0, 10.0)});
  const Grid grid = Grid::periodic(-40, 40, n);
  const Eigen::MatrixXcd initial =
      hermite_functions(HermiteBasis{1.0, 0.0, states}, grid.points(), states).cast<std::complex<double>>() *
      std::sqrt(grid.spacing());

  auto propagation = [&](int threads) {
    return [&, threads] {
      SplitOperatorPropagator p(PotentialPath::co_moving(grid, trap, protocol), states, SplitOrder::strang, threads);
      Eigen::MatrixXcd psi = initial;
      const auto t0 = std::chrono::steady_clock::now();
      propagate(p, psi, 0.0, tau, steps);
      return seconds_since(t0);
    };
  };
  auto fft_floor = [&] {
    fftw_complex* buffer = fftw_alloc_complex(n * std::size_t(states));
    const int size = int(n);
    fftw_plan f = fftw_plan_many_dft(1, &size, states, buffer, nullptr, 1, size, buffer, nullptr, 1, size,
                                     FFTW_FORWARD, FFTW_MEASURE);
    fftw_plan b = fftw_plan_many_dft(1, &size, states, buffer, nullptr, 1, size, buffer, nullptr, 1, size,
                                     FFTW_BACKWARD, FFTW_MEASURE);
    for (std::size_t i = 0; i < n * std::size_t(states); ++i) buffer[i][0] = buffer[i][1] = 1e-3;
    const auto t0 = std::chrono::steady_clock::now();
    for (int s = 0; s < steps; ++s) {
      fftw_execute(f);
      fftw_execute(b);
    }
    const double sec = seconds_since(t0);
    fftw_destroy_plan(f);
    fftw_destroy_plan(b);
    fftw_free(buffer);
    return sec;
  };

  const double state_mib = double(n) * states * 16 / (1024.0 * 1024.0);
  std::printf("# %d states x %zu points (%.1f MiB of complex samples), %d Strang steps (2 batch FFTs each)\n", states, n,
              state_mib, steps);
  const Measurement one = in_child(propagation(1));
  const Measurement two = in_child(propagation(2));
  const Measurement floor = in_child(fft_floor);
  std::printf("%-34s %10s %10s %12s\n", "case", "time_s", "peak_MiB", "ratio");
  std::printf("%-34s %10.2f %10.1f %12s\n", "split-operator, 1 thread", one.seconds, one.mib, "1");
  std::printf("%-34s %10.2f %10.1f %12.2f\n", "split-operator, 2 threads", two.seconds, two.mib, one.seconds / two.seconds);
  std::printf("%-34s %10.2f %10.1f %12.2f\n", "FFTs alone (floor), 1 thread", floor.seconds, floor.mib,
              floor.seconds / one.seconds);
  std::printf("# ratio column: speed-up of 2 threads over 1; FFT share of the 1-thread propagation\n");
}
