#include "seatilt/error.hpp"

namespace seatilt {

std::string input_message(const std::string& file, const std::string& variable,
                          const std::string& problem) {
  std::string m = file;
  if (!variable.empty()) m += ": variable " + variable;
  m += ": " + problem;
  return m;
}

}  // namespace seatilt
