// seatilt/version.hpp — version of seatilt and of the libraries it runs on.
#pragma once

#include <string>

namespace seatilt {

/// Returns the seatilt version ("MAJOR.MINOR.PATCH").
std::string version();

/// Returns one line each: seatilt, netCDF-C, HDF5, PROJ, UDUNITS-2 versions.
std::string version_report();

}  // namespace seatilt
