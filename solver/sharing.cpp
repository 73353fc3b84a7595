#include "solver/sharing.hpp"

#include <exception>

#include "solver/errors.hpp"

namespace trapwork {

void exchange_parts(const PartSharing& sharing, std::vector<std::vector<double>>& parts, std::size_t first,
                    std::size_t width, const std::function<void()>& compute) {
  std::exception_ptr failure;
  std::string message;
  try {
    compute();
  } catch (const std::exception& e) {
    failure = std::current_exception();
    message = e.what();
  } catch (...) {
    failure = std::current_exception();
    message = "an unknown error";
  }
  if (sharing.shared()) {
    for (std::size_t k = 0; k < parts.size() && !failure; ++k)
      TRAPWORK_EXPECT(!sharing.mine(first + k) || parts[k].size() == width, "exchange_parts: a part of another width");
    sharing.exchange(parts, first, width, failure ? &message : nullptr);
  }
  if (failure) std::rethrow_exception(failure);
}

std::vector<std::vector<double>> shared_parts(const PartSharing& sharing, std::size_t first, std::size_t count,
                                              std::size_t width,
                                              const std::function<std::vector<double>(std::size_t)>& compute) {
  std::vector<std::vector<double>> parts(count);
  exchange_parts(sharing, parts, first, width, [&] {
    for (std::size_t k = 0; k < count; ++k)
      if (sharing.mine(first + k)) parts[k] = compute(first + k);
  });
  return parts;
}

}  // namespace trapwork
