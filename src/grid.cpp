// Notation: lat/phi latitude, lon/lambda longitude; _deg degrees, _rad radians.
// M meridional and N prime-vertical radius of curvature (m); e2 first
// eccentricity squared; Omega earth rotation rate (rad s-1).
#include "seatilt/grid.hpp"

#include <cmath>
#include <numeric>
#include <stdexcept>
#include <string>

namespace seatilt {

namespace {
constexpr double pi = 3.14159265358979323846;
constexpr double deg = pi / 180.0;

void check_axis(const std::vector<double>& v, const char* what) {
  if (v.size() < 2)
    throw std::invalid_argument(std::string(what) + " axis has fewer than 2 points");
  for (double x : v)
    if (!std::isfinite(x))
      throw std::invalid_argument(std::string(what) + " holds a non-finite value");
  const bool up = v[1] > v[0];
  for (std::size_t k = 1; k < v.size(); ++k) {
    const bool ok = up ? v[k] > v[k - 1] : v[k] < v[k - 1];
    if (!ok)
      throw std::invalid_argument(std::string(what) + " is not strictly monotonic (at index " +
                                  std::to_string(k) + ")");
  }
}
}  // namespace

void sincosd(double x, double& s, double& c) {
  // Reduce to [-45, 45] exactly with remquo, as GeographicLib's Math::sincosd
  // does, so that sin(30) = 0.5 and sin(180) = 0 without rounding residue.
  int q = 0;
  double r = std::remquo(x, 90.0, &q);
  // sin(+-30 deg) = +-1/2 exactly; the radian route would miss by 1 ulp.
  double sr = 0, cr = 0;
  if (std::fabs(r) == 30.0) {
    sr = std::copysign(0.5, r);
    cr = std::sqrt(0.75);
  } else {
    r *= deg;
    sr = std::sin(r);
    cr = std::cos(r);
  }
  switch (static_cast<unsigned>(q) & 3U) {
    case 0U: s = sr; c = cr; break;
    case 1U: s = cr; c = -sr; break;
    case 2U: s = -sr; c = -cr; break;
    default: s = -cr; c = sr; break;
  }
  if (x != 0.0) { s += 0.0; c += 0.0; }  // turn -0 into +0, except sin(-0)
}

double meridional_radius(EarthModel model, double lat_rad) {
  if (model == EarthModel::sphere) return earth::mean_radius;
  // M = a (1 - e2) / (1 - e2 sin^2 phi)^(3/2)   [NIMA TR8350.2 3rd ed., ch. 4; REFERENCES §4]
  const double s = std::sin(lat_rad);
  const double w2 = 1.0 - earth::wgs84_e2 * s * s;
  return earth::wgs84_a * (1.0 - earth::wgs84_e2) / (w2 * std::sqrt(w2));
}

double prime_vertical_radius(EarthModel model, double lat_rad) {
  if (model == EarthModel::sphere) return earth::mean_radius;
  // N = a / (1 - e2 sin^2 phi)^(1/2)
  const double s = std::sin(lat_rad);
  return earth::wgs84_a / std::sqrt(1.0 - earth::wgs84_e2 * s * s);
}

double coriolis(double lat_deg) {
  double s = 0, c = 0;
  sincosd(lat_deg, s, c);
  return 2.0 * earth::omega * s;  // f = 2 Omega sin(phi)  (s-1)
}

double beta(EarthModel model, double lat_deg) {
  double s = 0, c = 0;
  sincosd(lat_deg, s, c);
  // beta = df/dy = (1/M) d(2 Omega sin phi)/dphi = 2 Omega cos(phi) / M  (m-1 s-1)
  return 2.0 * earth::omega * c / meridional_radius(model, lat_deg * deg);
}

double normal_gravity(double lat_deg) {
  double s = 0, c = 0;
  sincosd(lat_deg, s, c);
  // Somigliana: gamma = gamma_e (1 + k sin^2 phi) / sqrt(1 - e2 sin^2 phi)
  // [NIMA TR8350.2 3rd ed., Eq. 4-1]  (m s-2)
  return earth::gamma_e * (1.0 + earth::somigliana_k * s * s) /
         std::sqrt(1.0 - earth::wgs84_e2 * s * s);
}

Grid::Grid(std::vector<double> lat_deg, std::vector<double> lon_deg)
    : lat_deg_(std::move(lat_deg)), lon_deg_(std::move(lon_deg)) {
  check_axis(lat_deg_, "latitude");
  for (double x : lat_deg_)
    if (std::fabs(x) > 90.0) throw std::invalid_argument("latitude outside [-90, 90]");
  for (double x : lon_deg_)
    if (!std::isfinite(x)) throw std::invalid_argument("longitude holds a non-finite value");
  if (lon_deg_.size() < 2) throw std::invalid_argument("longitude axis has fewer than 2 points");

  // Unwrap longitudes into a strictly increasing sequence: a step that goes
  // down is taken as a crossing of the 0/360 or +-180 seam.
  std::vector<double> un(lon_deg_.size());
  un[0] = lon_deg_[0];
  for (std::size_t i = 1; i < un.size(); ++i) {
    double d = std::fmod(lon_deg_[i] - lon_deg_[i - 1], 360.0);
    if (d <= 0.0) d += 360.0;
    un[i] = un[i - 1] + d;
  }
  if (un.back() - un.front() >= 360.0)
    throw std::invalid_argument("longitudes span 360 degrees or more (repeated seam column?)");
  // Strict monotonicity in the file: a longitude axis that turns back (not a
  // seam crossing) shows up as a total span > 360 above, or as a zero step.
  for (std::size_t i = 1; i < un.size(); ++i)
    if (!(un[i] > un[i - 1]))
      throw std::invalid_argument("longitude is not strictly monotonic (at index " +
                                  std::to_string(i) + ")");
  // A descending longitude axis unwraps to a span near 360*(n-1)/n: refuse it
  // when the plain values descend monotonically.
  bool plain_desc = true;
  for (std::size_t i = 1; i < lon_deg_.size(); ++i)
    if (!(lon_deg_[i] < lon_deg_[i - 1])) plain_desc = false;
  if (plain_desc) throw std::invalid_argument("longitude decreases with index (not supported)");

  lon_rad_.resize(un.size());
  for (std::size_t i = 0; i < un.size(); ++i) lon_rad_[i] = un[i] * deg;
  lat_rad_.resize(lat_deg_.size());
  for (std::size_t j = 0; j < lat_deg_.size(); ++j) lat_rad_[j] = lat_deg_[j] * deg;

  // Periodic: uniform spacing (1e-6 relative) and n * step == 360 (to 1e-6 deg).
  const double step = (un.back() - un.front()) / static_cast<double>(un.size() - 1);
  bool uniform = true;
  for (std::size_t i = 1; i < un.size(); ++i)
    if (std::fabs((un[i] - un[i - 1]) - step) > 1e-6 * step) uniform = false;
  periodic_ = uniform && std::fabs(step * static_cast<double>(un.size()) - 360.0) < 1e-6 * 360.0;
}

double Grid::dlat_deg() const {
  return std::fabs(lat_deg_.back() - lat_deg_.front()) / static_cast<double>(lat_deg_.size() - 1);
}

double Grid::dlon_deg() const {
  return (lon_rad_.back() - lon_rad_.front()) / deg / static_cast<double>(lon_rad_.size() - 1);
}

}  // namespace seatilt
