// seatilt/grid.hpp — coordinates, earth constants and metric terms.
//
// Owns: the earth and gravity constants (the only copy in the project), the
// radii of curvature, the Coriolis and beta parameters, normal gravity, and
// the immutable latitude–longitude Grid (1-D coordinates in file order,
// periodicity, longitude unwrapping). Does not own finite differences
// (kernel.hpp) or netCDF access (reader.hpp).
//
// Method: coordinates are kept in the input's order (latitude may descend);
// derivatives are taken in index space and divided by the coordinate's own
// index derivative (kernel.hpp), so uniform, non-uniform, ascending and
// descending axes share one code path.
//
// References
//  [1] NIMA TR8350.2, 3rd ed. (2000), Department of Defense World Geodetic
//      System 1984: a, 1/f, GM, omega; Somigliana normal gravity, Eq. 4-1.
//  [2] H. Moritz (2000), Geodetic Reference System 1980, J. Geodesy 74,
//      128-133, doi:10.1007/s001900050278: mean radius R1 = (2a+b)/3.
//  [3] CGPM (1901), standard acceleration of gravity g0 = 9.80665 m s-2.
//  [4] Groten (2004), Fundamental parameters and current best estimates,
//      J. Geodesy 77, 724-797: Earth rotation rate 7.292115e-5 rad s-1
//      (as used by TEOS-10 gsw_f).
//
// Accuracy: closed forms in double precision (relative error ~1e-15).
#pragma once

#include <cstddef>
#include <string>
#include <vector>

namespace seatilt {

// ---- constants ([n] = reference above) -----------------------------------
namespace earth {
inline constexpr double wgs84_a = 6378137.0;                 // m, [1]
inline constexpr double wgs84_inv_f = 298.257223563;         // 1, [1]
inline constexpr double wgs84_f = 1.0 / wgs84_inv_f;         // 1
inline constexpr double wgs84_e2 = wgs84_f * (2.0 - wgs84_f);  // 1, = 0.00669437999014 [1]
inline constexpr double wgs84_b = wgs84_a * (1.0 - wgs84_f);   // m, = 6356752.3142 [1]
inline constexpr double mean_radius = 6371008.7714;          // m, R1 = (2a+b)/3 [2]
inline constexpr double omega = 7.292115e-5;                 // rad s-1, [1], [4]
inline constexpr double standard_gravity = 9.80665;          // m s-2, [3]
// Somigliana normal gravity constants, [1] Eq. 4-1 (3rd ed. values).
inline constexpr double gamma_e = 9.7803253359;              // m s-2, equatorial
inline constexpr double somigliana_k = 0.00193185265241;     // 1
}  // namespace earth

/// Earth model for the metric terms.
enum class EarthModel {
  sphere,  ///< IUGG mean radius R1 for both radii
  wgs84,   ///< WGS84 meridional (M) and prime-vertical (N) radii of curvature
};

/// Gravity model.
enum class GravityModel {
  standard,  ///< g0 = 9.80665 m s-2 everywhere
  wgs84,     ///< Somigliana normal gravity at the node latitude
  constant,  ///< a user-given number (m s-2)
};

/// Returns the meridional radius of curvature M(lat) (m); lat in radians.
/// sphere: R1. wgs84: M = a(1-e2)/(1-e2 sin2 lat)^(3/2) [1].
double meridional_radius(EarthModel model, double lat_rad);

/// Returns the prime-vertical radius of curvature N(lat) (m); lat in radians.
/// sphere: R1. wgs84: N = a/(1-e2 sin2 lat)^(1/2) [1].
double prime_vertical_radius(EarthModel model, double lat_rad);

/// Returns the Coriolis parameter f = 2 Omega sin(lat) (s-1); lat in degrees.
/// Uses an exactly reduced degree sine so f(0) == 0 and f(30) is exact to 1 ulp.
double coriolis(double lat_deg);

/// Returns beta = df/dy = 2 Omega cos(lat) / M(lat) (m-1 s-1); lat in degrees.
double beta(EarthModel model, double lat_deg);

/// Returns the Somigliana normal gravity on the WGS84 ellipsoid (m s-2) [1]
/// Eq. 4-1: gamma = gamma_e (1 + k sin2 lat)/sqrt(1 - e2 sin2 lat); lat in degrees.
double normal_gravity(double lat_deg);

/// Returns sin and cos of an angle in degrees, reduced exactly first so that
/// multiples of 90 and 30 degrees give exact results (GeographicLib habit).
void sincosd(double deg, double& s, double& c);

/// Owning, contiguous, row-major 2-D array of doubles; NaN marks a missing cell.
struct Field {
  std::size_t ny = 0;  ///< rows (latitude index)
  std::size_t nx = 0;  ///< columns (longitude index)
  std::vector<double> data;

  Field() = default;
  Field(std::size_t rows, std::size_t cols, double value = 0.0)
      : ny(rows), nx(cols), data(rows * cols, value) {}
  double& at(std::size_t j, std::size_t i) { return data[j * nx + i]; }
  [[nodiscard]] double at(std::size_t j, std::size_t i) const { return data[j * nx + i]; }
  double* row(std::size_t j) { return data.data() + j * nx; }
  [[nodiscard]] const double* row(std::size_t j) const { return data.data() + j * nx; }
};

/// Immutable 1-D latitude–longitude grid in the input's order.
class Grid {
public:
  /// Builds a grid from 1-D coordinates in degrees (file order).
  /// Throws std::invalid_argument (message without file name; the caller adds
  /// it) when an axis has fewer than 2 points, holds a non-finite value, is not
  /// strictly monotonic, when |lat| > 90, or when longitudes span more than 360
  /// degrees after unwrapping. Detects a global periodic longitude axis: the
  /// spacing is uniform to 1e-6 relative and nx * spacing == 360 degrees.
  Grid(std::vector<double> lat_deg, std::vector<double> lon_deg);

  [[nodiscard]] std::size_t ny() const { return lat_deg_.size(); }
  [[nodiscard]] std::size_t nx() const { return lon_deg_.size(); }
  /// Latitudes (degrees north), file order.
  [[nodiscard]] const std::vector<double>& lat_deg() const { return lat_deg_; }
  /// Longitudes (degrees east), file order, as in the file.
  [[nodiscard]] const std::vector<double>& lon_deg() const { return lon_deg_; }
  /// Longitudes unwrapped to a strictly increasing sequence (radians).
  [[nodiscard]] const std::vector<double>& lon_rad() const { return lon_rad_; }
  /// Latitudes in radians, file order.
  [[nodiscard]] const std::vector<double>& lat_rad() const { return lat_rad_; }
  /// True when the longitude axis closes on itself (global grid).
  [[nodiscard]] bool periodic() const { return periodic_; }
  /// True when latitude decreases with the row index.
  [[nodiscard]] bool lat_descending() const { return lat_deg_.size() > 1 && lat_deg_[1] < lat_deg_[0]; }
  /// Mean absolute spacing of latitude and longitude (degrees).
  [[nodiscard]] double dlat_deg() const;
  [[nodiscard]] double dlon_deg() const;

private:
  std::vector<double> lat_deg_, lon_deg_, lat_rad_, lon_rad_;
  bool periodic_ = false;
};

}  // namespace seatilt
