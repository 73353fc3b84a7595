// libFuzzer target: the measured-data readers (solver/scenario/data_files.hpp), each of the four
// kinds and the kind-detecting work reader on the same text. Only InputError may come out.
#include <cstddef>
#include <cstdint>
#include <string_view>

#include "solver/errors.hpp"
#include "solver/scenario/data_files.hpp"

namespace {
template <class F>
void expect_input_error_only(F&& read) {
  try {
    (void)read();
  } catch (const trapwork::InputError&) {
  }
}
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  expect_input_error_only([&] { return trapwork::read_work_samples_text(text, "fuzz.csv"); });
  expect_input_error_only([&] { return trapwork::read_level_pairs_text(text, "fuzz.csv"); });
  expect_input_error_only([&] { return trapwork::read_work_histogram_text(text, "fuzz.csv"); });
  expect_input_error_only([&] { return trapwork::read_transition_lines_text(text, "fuzz.csv"); });
  expect_input_error_only([&] { return trapwork::read_work_data_text(text, "fuzz.csv"); });
  return 0;
}
