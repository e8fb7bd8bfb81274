#include "seatilt/version.hpp"

#include <hdf5.h>
#include <netcdf.h>
#include <proj.h>

namespace seatilt {

std::string version() { return SEATILT_VERSION; }

std::string version_report() {
  unsigned maj = 0, min = 0, rel = 0;
  H5get_libversion(&maj, &min, &rel);
  const PJ_INFO pj = proj_info();
  std::string nc = nc_inq_libvers();
  nc = nc.substr(0, nc.find(' '));
  return "seatilt " + version() + "\nnetCDF-C " + nc + "\nHDF5 " + std::to_string(maj) + "." +
         std::to_string(min) + "." + std::to_string(rel) + "\nPROJ " + pj.version + "\n";
}

}  // namespace seatilt
