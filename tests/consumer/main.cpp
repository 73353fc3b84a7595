// Lowest level of an oscillator through the installed library: exits 0 when E_0 = omega/2.
#include <trapwork/solver/spectrum.hpp>

#include <cmath>

int main() {
  using namespace trapwork;
  const Potential trap({Term("trap", Shape::harmonic, {{"frequency", 2.0}})});
  SpectrumRequest request;
  request.options.levels = 1;
  const SpectrumResult r = compute_spectrum(trap, request);
  return std::abs(r.spectrum.energies(0) - 1.0) < 1e-10 ? 0 : 1;
}
