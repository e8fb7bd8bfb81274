// seatilt/grid.hpp — coordinates, earth constants and metric terms.
//
// Owns: the earth and gravity constants (the only copy in the project), the
// radii of curvature, the Coriolis and beta parameters, normal gravity, and
// the immutable latitude–longitude Grid (1-D coordinates in file order,
// periodicity, longitude unwrapping); for projected and curvilinear grids the
// CF grid mapping -> PROJ construction (Projection) and the immutable
// CurvilinearGrid (node latitude/longitude and the local metric that turns
// grid derivatives into east/north derivatives). Does not own finite
// differences of data (kernel.hpp) or netCDF access (reader.hpp).
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
//  [5] CF Conventions 1.12, section 5.6 (grid mappings, crs_wkt) and
//      Appendix F (grid_mapping_name values and their parameters).
//  [6] PROJ 9.1 C API: proj_trans (inverse projection), proj_factors
//      (dx/dlam, dx/dphi, dy/dlam, dy/dphi per radian on a unit semi-major
//      axis, meridian convergence, scale factors); REFERENCES.md §7.
//  [7] J. P. Snyder (1987), Map Projections - A Working Manual, USGS
//      Professional Paper 1395 (scale factors h, k and convergence).
//
// Accuracy: closed forms in double precision (relative error ~1e-15).
#pragma once

#include <cmath>
#include <cstddef>
#include <map>
#include <memory>
#include <string>
#include <utility>
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
  /// Makes this a ROWS x COLS field of VALUE, reusing the storage (no
  /// allocation, no fresh pages when it is large enough already).
  void reset(std::size_t rows, std::size_t cols, double value) {
    ny = rows;
    nx = cols;
    data.assign(rows * cols, value);
  }
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

// ---- projected and curvilinear grids -----------------------------------------
//
// Method. For every node the metric B turns derivatives along the grid lines
// into directional derivatives along local east e and north n (per metre):
//   d/de = B.e_c d/dc + B.e_r d/dr,   d/dn = B.n_c d/dc + B.n_r d/dr,
// where c is the column coordinate (x in metres for a projection, the column
// index for 2-D latitude/longitude) and r the row coordinate (y, or the row
// index). This is exact for any projection, conformal or not.
//  - Projection [5], [6]: with de = N cos(phi) dlambda and dn = M dphi on the
//    CRS's ellipsoid and PROJ's derivatives (times a), the Jacobian of the map
//    is dX/de = a dx_dlam / (N cos phi), dX/dn = a dx_dphi / M (likewise Y),
//    and by the chain rule B = (dX/de, dY/de; dX/dn, dY/dn) (no inversion).
//  - 2-D latitude/longitude: node positions P (ECEF on the ellipsoid) are
//    projected on the node's tangent plane, E_m = (P_m - P_0).e_hat,
//    N_m = (P_m - P_0).n_hat, and differentiated along both index directions
//    with the widest centred stencil that fits (7-point; narrower or one-sided
//    at the edges): D = d(E, N)/d(i, j) at the node (exact: dP/dlambda =
//    N cos(phi) e_hat, dP/dphi = M n_hat). Then B = D^-T. Unlike differences
//    of longitude this has no singularity near a pole.
// A node at a pole (within 2e-5 rad, ~130 m, for a projection, where PROJ no
// longer evaluates its derivatives at the node itself; within 1e-9 degrees
// for 2-D latitude/longitude) has no east: its metric is NaN (masked_pole).

/// Figure of the earth: semi-major axis A (m) and first eccentricity squared E2
/// (0 for a sphere of radius A).
struct Ellipsoid {
  double a = earth::wgs84_a;
  double e2 = earth::wgs84_e2;
};

/// Returns the figure of an EarthModel: WGS84 [1], or the sphere of radius R1 [2].
Ellipsoid ellipsoid_of(EarthModel model);

/// Returns M(lat) = a(1-e2)/(1-e2 sin2 lat)^(3/2) (m) on ELL; lat in radians [1].
double meridional_radius(const Ellipsoid& ell, double lat_rad);

/// Returns N(lat) = a/(1-e2 sin2 lat)^(1/2) (m) on ELL; lat in radians [1].
double prime_vertical_radius(const Ellipsoid& ell, double lat_rad);

/// The attributes of a CF grid mapping variable [5] (names as in the file).
struct GridMapping {
  std::string variable;  ///< name of the grid mapping variable (for messages)
  std::map<std::string, std::vector<double>> numbers;  ///< numeric attributes
  std::map<std::string, std::string> texts;            ///< text attributes
  /// Metres per unit of the x/y coordinate variables (1 for m, 1000 for km):
  /// false_easting/false_northing are in those units [5] Table F.1.
  double unit_m = 1.0;
};

/// What a projection does at one point (PROJ proj_factors [6]).
struct ProjectionFactors {
  double lat_deg = 0, lon_deg = 0;  ///< node position (degrees north, east)
  double meridional_scale = 0;      ///< h, along the meridian (1)
  double parallel_scale = 0;        ///< k, along the parallel (1)
  double areal_scale = 0;           ///< h k sin(theta') (1)
  double angular_distortion = 0;    ///< omega (degrees)
  double convergence_deg = 0;       ///< gamma = -atan2(dx/dphi, dy/dphi) (degrees)
};

/// A map projection built with PROJ from a CF grid mapping.
///
/// grid_mapping_name values (CF Appendix F -> PROJ): polar_stereographic
/// (stere, lat_0 = +-90, standard_parallel or scale_factor_at_projection_origin),
/// stereographic, lambert_azimuthal_equal_area (laea), lambert_conformal_conic
/// (lcc, 1 or 2 standard parallels), transverse_mercator (tmerc),
/// albers_conical_equal_area (aea), azimuthal_equidistant (aeqd), mercator,
/// lambert_cylindrical_equal_area (cea), orthographic, sinusoidal. Without
/// grid_mapping_name, a crs_wkt (or GDAL's spatial_ref) attribute with a
/// projected CRS. With both, the CF attributes define the projection (the
/// ellipsoid comes from crs_wkt when the CF attributes give none) and the two
/// must agree (checked by CurvilinearGrid). Ellipsoid: earth_radius (sphere),
/// semi_major_axis with inverse_flattening (0 = sphere) and/or
/// semi_minor_axis, semi_major_axis alone (sphere), reference_ellipsoid_name
/// "WGS 84"/"GRS 1980"; none: WGS84 (common practice, no source).
/// Not thread-safe: use one Projection from one thread at a time.
class Projection {
public:
  /// Builds the projection. Throws std::invalid_argument (message without the
  /// file name; the caller adds it) for an unknown or unsupported
  /// grid_mapping_name, a missing, non-finite or out-of-range parameter,
  /// inconsistent ones (polar_stereographic with latitude_of_projection_origin
  /// other than +-90 or a standard parallel in the other hemisphere, both
  /// standard_parallel and scale_factor_at_projection_origin that disagree,
  /// semi_minor_axis and inverse_flattening that disagree, a semi-major axis
  /// outside 6000..7000 km, a prime meridian other than Greenwich), a crs_wkt
  /// that PROJ cannot read or that is not a projected CRS, and anything PROJ
  /// refuses. Never prints (PROJ's logging is off).
  explicit Projection(const GridMapping& mapping);
  ~Projection();
  Projection(Projection&&) noexcept;
  Projection& operator=(Projection&&) noexcept;
  Projection(const Projection&) = delete;
  Projection& operator=(const Projection&) = delete;

  /// grid_mapping_name, or the projection method of the crs_wkt.
  [[nodiscard]] const std::string& name() const;
  /// The PROJ definition used ("+proj=stere +lat_0=90 ... +units=m").
  [[nodiscard]] const std::string& definition() const;
  /// The ellipsoid (or sphere) of the CRS.
  [[nodiscard]] const Ellipsoid& ellipsoid() const;
  /// The parameters used, as (name, value text) pairs in a fixed order, for reports.
  [[nodiscard]] const std::vector<std::pair<std::string, std::string>>& parameters() const;
  /// True when crs_wkt was given along with grid_mapping_name (see agree()).
  [[nodiscard]] bool has_wkt_alternative() const;

  /// Inverse projection of X, Y (m, false easting/northing included) to
  /// LAT_DEG, LON_DEG (degrees, lon in -180..180); NaN outside the domain.
  void inverse(double x, double y, double& lat_deg, double& lon_deg) const;
  /// Forward projection (degrees -> m); NaN outside the domain.
  void forward(double lat_deg, double lon_deg, double& x, double& y) const;
  /// Scale factors and convergence at the point X, Y (m); NaN fields outside the domain.
  [[nodiscard]] ProjectionFactors factors(double x, double y) const;
  /// Distance (m, on the ellipsoid's mean radius) between the positions that
  /// the CF attributes and the crs_wkt give to X, Y; 0 without crs_wkt.
  [[nodiscard]] double disagreement_m(double x, double y) const;

private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

/// Local metric of a node (see "Method" above): east and north derivatives
/// from derivatives along the column coordinate c and the row coordinate r.
struct DirectionalMetric {
  double e_c = 0, e_r = 0;  ///< d/de = e_c d/dc + e_r d/dr  (units of c, r per metre)
  double n_c = 0, n_r = 0;  ///< d/dn = n_c d/dc + n_r d/dr
};

/// Immutable projected or curvilinear grid: node positions and metrics,
/// row-major (j row, i column), in the input's order.
/// Memory: 48 bytes per node.
class CurvilinearGrid {
public:
  /// Builds a projected grid from 1-D X (nx) and Y (ny) in metres, strictly
  /// monotonic (either direction), with the projection of MAPPING; node
  /// positions and metrics from PROJ on all OpenMP threads. Throws
  /// std::invalid_argument (message without file name) as Projection does,
  /// and when an axis has fewer than 2 points, holds a non-finite value or is
  /// not monotonic, when a node lies outside the projection's domain, or when
  /// crs_wkt and the CF attributes place a grid corner or the centre more
  /// than 1/100 of a grid spacing apart.
  CurvilinearGrid(const GridMapping& mapping, std::vector<double> x_m, std::vector<double> y_m);

  /// Builds a curvilinear grid from 2-D LAT_DEG, LON_DEG (ny x nx row-major,
  /// degrees; longitudes in any range, wrapped) on the figure of EARTH.
  /// Throws std::invalid_argument when ny or nx < 2, the sizes differ from
  /// ny*nx, a value is not finite, |lat| > 90, or the nodes around a
  /// non-pole node do not span a plane (coincident or collinear neighbours).
  CurvilinearGrid(std::size_t ny, std::size_t nx, std::vector<double> lat_deg,
                  std::vector<double> lon_deg, EarthModel earth);

  ~CurvilinearGrid();
  CurvilinearGrid(CurvilinearGrid&&) noexcept;
  CurvilinearGrid& operator=(CurvilinearGrid&&) noexcept;
  CurvilinearGrid(const CurvilinearGrid&) = delete;
  CurvilinearGrid& operator=(const CurvilinearGrid&) = delete;

  [[nodiscard]] std::size_t ny() const { return ny_; }
  [[nodiscard]] std::size_t nx() const { return nx_; }
  /// True for a projected grid (x/y with a grid mapping).
  [[nodiscard]] bool projected() const { return projection_ != nullptr; }
  /// The projection (null for 2-D latitude/longitude).
  [[nodiscard]] const Projection* projection() const { return projection_.get(); }
  /// Node latitudes and longitudes (degrees), ny x nx row-major.
  [[nodiscard]] const std::vector<double>& lat_deg() const { return lat_deg_; }
  [[nodiscard]] const std::vector<double>& lon_deg() const { return lon_deg_; }
  [[nodiscard]] double lat_deg(std::size_t j, std::size_t i) const { return lat_deg_[j * nx_ + i]; }
  [[nodiscard]] double lon_deg(std::size_t j, std::size_t i) const { return lon_deg_[j * nx_ + i]; }
  /// Column coordinate c (x in metres, or 0..nx-1) and row coordinate r (y, or 0..ny-1).
  [[nodiscard]] const std::vector<double>& col_coord() const { return col_; }
  [[nodiscard]] const std::vector<double>& row_coord() const { return row_; }
  /// The metric of node (j, i); NaN members at a pole.
  [[nodiscard]] const DirectionalMetric& metric(std::size_t j, std::size_t i) const {
    return metric_[j * nx_ + i];
  }
  /// True when node (j, i) is at a pole (no east; metric NaN).
  [[nodiscard]] bool at_pole(std::size_t j, std::size_t i) const {
    return std::isnan(metric_[j * nx_ + i].e_c);
  }
  /// Figure of the earth for the metric terms (M, N, beta): the CRS's
  /// ellipsoid for a projection, the --earth model otherwise.
  [[nodiscard]] const Ellipsoid& ellipsoid() const { return ellipsoid_; }
  /// Median distance between neighbouring nodes along rows and columns (m).
  [[nodiscard]] double spacing_m() const { return spacing_m_; }

private:
  std::size_t ny_ = 0, nx_ = 0;
  std::vector<double> lat_deg_, lon_deg_, col_, row_;
  std::vector<DirectionalMetric> metric_;
  Ellipsoid ellipsoid_;
  double spacing_m_ = 0;
  std::unique_ptr<Projection> projection_;
};

}  // namespace seatilt
