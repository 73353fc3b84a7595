// libFuzzer target: scenario text -> read_scenario_text, then what `trapwork work` and
// `trapwork sweep` build from it (protocol, work request, every sweep point).
// Bad input must end in InputError or PhysicsError; anything else (another exception, a
// crash, a sanitizer report, a hang) is a bug. Run: see DEVELOPERS.md, "Fuzzing".
#include <cstddef>
#include <cstdint>
#include <string_view>

#include "solver/errors.hpp"
#include "solver/scenario/scenario.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  // A data file named in the scenario is opened. Device and process files (/dev/zero,
  // /dev/stdin, /proc/...) never end or block; the tool reads what the user names, so they
  // are left out here rather than guarded in the reader.
  for (std::string_view device : {"/dev", "/proc", "/sys"})
    if (text.find(device) != std::string_view::npos) return 0;
  try {
    // Data files are looked up beside the scenario: as if it sat in examples/, so that the
    // seeds' table files are found and their rows read.
    const trapwork::Scenario s = trapwork::read_scenario_text(text, TRAPWORK_SOURCE_DIR "/examples/fuzz.toml");
    if (s.protocol) (void)trapwork::build_protocol(s);
    if (s.work) (void)trapwork::work_request(s);
    if (s.sweep && s.protocol && s.work)
      for (std::size_t i = 0; i < s.sweep->points() && i < 16; ++i) {
        const trapwork::Scenario point = trapwork::at_sweep_point(s, i);
        (void)trapwork::build_protocol(point);
      }
  } catch (const trapwork::InputError&) {
  } catch (const trapwork::PhysicsError&) {
  }
  return 0;
}
