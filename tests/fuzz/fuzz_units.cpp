// libFuzzer target: quantity text -> parse_quantity, then conversion to internal units of a
// scenario and the display energy unit of the same text. Only InputError may come out.
#include <cstddef>
#include <cstdint>
#include <string>

#include "solver/errors.hpp"
#include "solver/units.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  const trapwork::UnitSystem units = trapwork::UnitSystem::for_trap(40 * trapwork::si::atomic_mass, 1e6);
  try {
    const trapwork::Quantity q = trapwork::parse_quantity(text);
    (void)units.to_internal(q, q.plain ? trapwork::Dimension::none() : q.dimension, "fuzz", text);
  } catch (const trapwork::InputError&) {
  }
  try {
    (void)trapwork::energy_unit(text, units, 1.0);
  } catch (const trapwork::InputError&) {
  }
  return 0;
}
