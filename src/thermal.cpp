// thermal.cpp — geostrophic currents at depth by thermal wind (see
// seatilt/thermal.hpp).
//
// Notation
//   k      input level, sorted by increasing depth/pressure (k = 0 shallowest)
//   m      output level (file order of the input, or as given by --levels)
//   j, i   row (latitude) and column (longitude), file order
//   z      height (m, positive up, <= 0 in the ocean); depth = -z
//   p      sea pressure (dbar)
//   rho'   density anomaly rho(SA, CT, p) - rho(SSO, 0, p) (kg m-3)
//   s      vertical shear du/dz or dv/dz (s-1)
//   I(z)   int_0^z s dz' (m s-1), trapezoidal (header block)
// Arrays over (level, row) are stored level-major: a[k * ny + j].

#include "seatilt/thermal.hpp"

#include <fcntl.h>
#include <geodesic.h>
#include <netcdf.h>
#include <sys/stat.h>
#include <udunits2.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <chrono>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <limits>
#include <mutex>
#include <random>
#include <sstream>
#include <stdexcept>
#include <utility>

#include "seatilt/error.hpp"
#include "seatilt/writer.hpp"
#include "seatilt/product.hpp"
#include "seatilt/teos10.hpp"

#ifndef SEATILT_VERSION
#define SEATILT_VERSION "unknown"
#endif

namespace seatilt {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

// ---- small helpers --------------------------------------------------------------

std::string trim(const std::string& s) {
  const auto b = s.find_first_not_of(" \t\r\n");
  if (b == std::string::npos) return {};
  const auto e = s.find_last_not_of(" \t\r\n");
  return s.substr(b, e - b + 1);
}

std::string lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

std::string join(const std::vector<std::string>& items, const char* sep) {
  std::string out;
  for (std::size_t k = 0; k < items.size(); ++k) out += (k ? sep : "") + items[k];
  return out;
}

std::string number_text(double x) {
  std::ostringstream s;
  s.precision(10);
  s << x;
  return s.str();
}

// Parses a whole string as a finite double; false otherwise.
bool parse_number(const std::string& text, double& out) {
  const std::string t = trim(text);
  if (t.empty()) return false;
  for (char c : t)
    if (!(std::isdigit(static_cast<unsigned char>(c)) || c == '.' || c == '-' || c == '+' ||
          c == 'e' || c == 'E'))
      return false;
  char* end = nullptr;
  errno = 0;
  out = std::strtod(t.c_str(), &end);
  return end == t.c_str() + t.size() && errno == 0 && std::isfinite(out);
}

// ---- netCDF attribute access (as reader.cpp does for the height file) --------------

bool is_numeric_type(nc_type t) {
  switch (t) {
    case NC_BYTE: case NC_UBYTE: case NC_SHORT: case NC_USHORT: case NC_INT:
    case NC_UINT: case NC_INT64: case NC_UINT64: case NC_FLOAT: case NC_DOUBLE:
      return true;
    default:
      return false;
  }
}

std::optional<std::string> text_att(int ncid, int varid, const char* name) {
  nc_type t = NC_NAT;
  std::size_t len = 0;
  if (nc_inq_att(ncid, varid, name, &t, &len) != NC_NOERR) return std::nullopt;
  if (t == NC_CHAR) {
    std::string s(len, '\0');
    if (len && nc_get_att_text(ncid, varid, name, s.data()) != NC_NOERR) return std::nullopt;
    while (!s.empty() && s.back() == '\0') s.pop_back();
    return s;
  }
  if (t == NC_STRING) {
    std::vector<char*> p(len, nullptr);
    if (len && nc_get_att_string(ncid, varid, name, p.data()) != NC_NOERR) return std::nullopt;
    std::vector<std::string> parts;
    for (char* c : p) parts.emplace_back(c ? c : "");
    if (len) nc_free_string(len, p.data());
    return join(parts, ", ");
  }
  return std::nullopt;
}

// Numeric attribute; absent -> nullopt, present but not numeric -> empty vector.
std::optional<std::vector<double>> number_att(int ncid, int varid, const char* name) {
  nc_type t = NC_NAT;
  std::size_t len = 0;
  if (nc_inq_att(ncid, varid, name, &t, &len) != NC_NOERR) return std::nullopt;
  if (!is_numeric_type(t) || len == 0) return std::vector<double>{};
  std::vector<double> v(len);
  if (nc_get_att_double(ncid, varid, name, v.data()) != NC_NOERR) return std::vector<double>{};
  return v;
}

std::vector<Attribute> copy_attributes(int ncid, int varid) {
  std::vector<Attribute> out;
  int natts = 0;
  if (varid == NC_GLOBAL ? nc_inq_natts(ncid, &natts) != NC_NOERR
                         : nc_inq_varnatts(ncid, varid, &natts) != NC_NOERR)
    return out;
  for (int k = 0; k < natts; ++k) {
    char name[NC_MAX_NAME + 1] = {0};
    if (nc_inq_attname(ncid, varid, k, name) != NC_NOERR) continue;
    nc_type t = NC_NAT;
    std::size_t len = 0;
    if (nc_inq_att(ncid, varid, name, &t, &len) != NC_NOERR) continue;
    Attribute a;
    a.name = name;
    a.nc_type = t;
    if (t == NC_CHAR || t == NC_STRING) {
      a.text = text_att(ncid, varid, name).value_or("");
    } else if (is_numeric_type(t)) {
      a.values.resize(len);
      if (len && nc_get_att_double(ncid, varid, name, a.values.data()) != NC_NOERR) continue;
    } else {
      continue;
    }
    out.push_back(std::move(a));
  }
  return out;
}

std::string attr_text(const std::vector<Attribute>& attrs, const std::string& name) {
  for (const auto& a : attrs)
    if (a.name == name && (a.nc_type == NC_CHAR || a.nc_type == NC_STRING)) return a.text;
  return {};
}

// ---- UDUNITS-2 (REFERENCES.md 8): one system, calls serialised ---------------------

std::mutex& units_mutex() {
  static std::mutex m;
  return m;
}

ut_system* unit_system() {
  static std::once_flag once;
  static ut_system* system = nullptr;
  std::call_once(once, [] {
    ut_set_error_message_handler(ut_ignore);  // library code never prints
    system = ut_read_xml(nullptr);
  });
  return system;
}

struct UnitFree {
  void operator()(ut_unit* u) const { ut_free(u); }
};
struct ConverterFree {
  void operator()(cv_converter* c) const { cv_free(c); }
};

// Finds target = value * scale + offset for UNITS -> TARGET (linear units only).
// Returns false when UNITS does not parse or is not convertible.
bool unit_converter(const std::string& units, const char* target, double& scale, double& offset) {
  std::lock_guard<std::mutex> lock(units_mutex());
  ut_system* system = unit_system();
  if (!system) return false;
  std::string buffer = units;
  char* text = ut_trim(buffer.data(), UT_UTF8);
  std::unique_ptr<ut_unit, UnitFree> from(ut_parse(system, text, UT_UTF8));
  std::unique_ptr<ut_unit, UnitFree> to(ut_parse(system, target, UT_ASCII));
  if (!from || !to || !ut_are_convertible(from.get(), to.get())) return false;
  std::unique_ptr<cv_converter, ConverterFree> cv(ut_get_converter(from.get(), to.get()));
  if (!cv) return false;
  offset = cv_convert_double(cv.get(), 0.0);
  scale = cv_convert_double(cv.get(), 1.0) - offset;
  return std::isfinite(scale) && std::isfinite(offset) && scale != 0.0;
}

// ---- column integration helpers (header block, "Integration") --------------------

// Where height zo falls among the levels z[0] > z[1] > ... > z[n-1].
struct Bracket {
  bool above = false;  // zo > z[0]: between the sea surface and the first level
  bool below = false;  // zo < z[n-1] (or n == 0)
  std::size_t k = 0;   // largest k with z[k] >= zo
  double t = 0.0;      // (zo - z[k]) / (z[k+1] - z[k]) in [0, 1); 0 on a level
};

Bracket find_bracket(const double* z, std::size_t n, double zo) {
  Bracket b;
  if (n == 0) {
    b.below = true;
    return b;
  }
  if (zo > z[0]) {
    b.above = true;
    return b;
  }
  // Largest k with z[k] >= zo (z decreasing): binary search.
  std::size_t lo = 0, hi = n;  // z[lo] >= zo holds; answer in [lo, hi)
  while (hi - lo > 1) {
    const std::size_t mid = (lo + hi) / 2;
    if (z[mid] >= zo) lo = mid;
    else hi = mid;
  }
  b.k = lo;
  if (z[lo] == zo) return b;
  if (lo + 1 >= n) {
    b.below = true;
    return b;
  }
  b.t = (zo - z[lo]) / (z[lo + 1] - z[lo]);
  return b;
}

// True when levels [0, n) reach the bracket (the value at zo needs them).
bool reaches(const Bracket& b, std::size_t n) {
  if (n == 0 || b.below) return false;
  if (b.above) return true;
  return b.t == 0.0 ? b.k < n : b.k + 1 < n;
}

// Deepest level index the value at bracket b depends on.
std::size_t deepest(const Bracket& b) { return b.above ? 0 : (b.t == 0.0 ? b.k : b.k + 1); }

// Prefix integrals P[k] = I(z[k]) for the first n levels.
void prefix_integrals(const double* z, const double* s, std::size_t n, double* P) {
  if (n == 0) return;
  P[0] = s[0] * z[0];  // s held at s[0] between the surface (z = 0) and z[0]
  for (std::size_t k = 0; k + 1 < n; ++k)
    P[k + 1] = P[k] + 0.5 * (s[k] + s[k + 1]) * (z[k + 1] - z[k]);  // trapezoidal rule
}

// I(zo) from prefix integrals; b must be reached by the usable levels.
double integral_at(const double* z, const double* s, const double* P, const Bracket& b, double zo) {
  if (b.above) return s[0] * zo;
  if (b.t == 0.0) return P[b.k];
  const double sz = s[b.k] + b.t * (s[b.k + 1] - s[b.k]);  // shear linear between levels
  return P[b.k] + 0.5 * (s[b.k] + sz) * (zo - z[b.k]);
}

// Linear interpolation of a level quantity at bracket b (constant above the first level).
double value_at(const double* a, const Bracket& b) {
  if (b.above) return a[0];
  if (b.t == 0.0) return a[b.k];
  return a[b.k] + b.t * (a[b.k + 1] - a[b.k]);
}

}  // namespace

// ---- options --------------------------------------------------------------------------

ThermalReference parse_reference(const std::string& text) {
  const std::string t = trim(text);
  ThermalReference r;
  if (t == "surface") return r;
  const std::string prefix = "no-motion:";
  if (t.rfind(prefix, 0) == 0) {
    double level = 0.0;
    if (parse_number(t.substr(prefix.size()), level) && level >= 0.0 && level <= 12000.0) {
      r.kind = ThermalReference::no_motion;
      r.level = level;
      return r;
    }
    throw UsageError("--reference: '" + t +
                     "': the level of no motion must be a number in 0..12000 (m, or dbar for "
                     "pressure levels)");
  }
  throw UsageError("--reference: '" + t + "' is not 'surface' or 'no-motion:LEVEL'");
}

std::vector<double> parse_levels(const std::string& text) {
  const std::string t = trim(text);
  std::vector<double> out;
  if (t.empty() || t == "all") return out;
  std::stringstream ss(t);
  std::string item;
  while (std::getline(ss, item, ',')) {
    double x = 0.0;
    if (!parse_number(item, x) || x < 0.0 || x > 12000.0)
      throw UsageError("--levels: '" + trim(item) +
                       "' is not a number in 0..12000 (m, or dbar for pressure levels)");
    out.push_back(x);
    if (out.size() > 10000) throw UsageError("--levels: more than 10000 levels");
  }
  if (out.empty()) throw UsageError("--levels: no level given");
  bool up = true, down = true;
  for (std::size_t k = 1; k < out.size(); ++k) {
    up = up && out[k] > out[k - 1];
    down = down && out[k] < out[k - 1];
  }
  if (!up && !down)
    throw UsageError("--levels: levels must be strictly increasing or strictly decreasing");
  return out;
}

void validate(const ThermalOptions& o) {
  if (o.order != 2 && o.order != 4 && o.order != 6)
    throw UsageError("--order: " + std::to_string(o.order) + " is not one of 2, 4, 6");
  if (!(o.equator_band_deg >= 0.0 && o.equator_band_deg <= 30.0))
    throw UsageError("--equator-band: " + number_text(o.equator_band_deg) +
                     " is outside 0..30 degrees");
  if (o.gravity == GravityModel::constant && !(o.gravity_value >= 0.1 && o.gravity_value <= 100.0))
    throw UsageError("--gravity: " + number_text(o.gravity_value) + " m s-2 is outside 0.1..100");
  if (!(o.rho0 >= 900.0 && o.rho0 <= 1100.0))
    throw UsageError("--rho0: " + number_text(o.rho0) + " kg m-3 is outside 900..1100");
}

// ---- ShearKernel ------------------------------------------------------------------------

ShearKernel::ShearKernel(const Grid& grid, const ThermalOptions& options)
    : grid_(grid), diff_(grid, options.order, options.coast == CoastMethod::one_sided) {
  validate(options);
  rows_.resize(grid.ny());
  for (std::size_t j = 0; j < grid.ny(); ++j) {
    const double lat = grid.lat_deg()[j];
    const double phi = grid.lat_rad()[j];
    double g = earth::standard_gravity;
    if (options.gravity == GravityModel::wgs84) g = normal_gravity(lat);
    if (options.gravity == GravityModel::constant) g = options.gravity_value;
    const double f = coriolis(lat);
    double s = 0, c = 0;
    sincosd(lat, s, c);
    Row r{};
    if (std::fabs(lat) >= 90.0 - 1e-9) {
      r.mask = profile_quality::masked_pole;
    } else if (std::fabs(lat) < options.equator_band_deg || f == 0.0) {
      r.mask = profile_quality::masked_equator;
    } else {
      // du/dz = (g/(rho0 f)) (1/M) d(rho)/d(phi); dv/dz = -(g/(rho0 f)) (1/(N cos phi)) d(rho)/d(lambda)
      r.coef_y = g / (options.rho0 * f * meridional_radius(options.earth, phi));
      r.coef_x = -g / (options.rho0 * f * prime_vertical_radius(options.earth, phi) * c);
      r.mask = 0;
    }
    rows_[j] = r;
  }
}

std::size_t ShearKernel::halo_rows() const { return static_cast<std::size_t>(diff_.reach()); }

void ShearKernel::compute(const Field& rho, std::size_t b0, std::size_t j0, std::size_t n,
                          Field& du_dz, Field& dv_dz, std::vector<std::uint8_t>& flags) const {
  const std::size_t ny = grid_.ny(), nx = grid_.nx(), h = halo_rows();
  const std::size_t need_lo = j0 >= h ? j0 - h : 0;
  const std::size_t need_hi = std::min(ny, j0 + n + h);
  if (rho.nx != nx || b0 > need_lo || b0 + rho.ny < need_hi || j0 + n > ny)
    throw std::logic_error("ShearKernel::compute: density band does not cover the halo");
  du_dz = Field(n, nx, nan);
  dv_dz = Field(n, nx, nan);
  flags.assign(n * nx, 0);
  const auto rows = static_cast<long>(n);
#pragma omp parallel for schedule(dynamic, 4)
  for (long r = 0; r < rows; ++r) {
    const auto q = static_cast<std::size_t>(r);
    const std::size_t j = j0 + q;
    const Row& row = rows_[j];
    const double* rr = rho.row(j - b0);
    for (std::size_t i = 0; i < nx; ++i) {
      std::uint8_t& fl = flags[q * nx + i];
      if (std::isnan(rr[i])) {
        fl = profile_quality::missing_density;
        continue;
      }
      if (row.mask) {
        fl = row.mask;
        continue;
      }
      const Derivative dp = diff_.d_phi(rho, b0, j, i);
      const Derivative dl = diff_.d_lambda(rho, b0, j, i);
      if (dp.status == Derivative::failed || dl.status == Derivative::failed) {
        fl = profile_quality::no_gradient;
        continue;
      }
      if (dp.status == Derivative::shortened || dl.status == Derivative::shortened)
        fl = profile_quality::one_sided;
      du_dz.at(q, i) = row.coef_y * dp.value;
      dv_dz.at(q, i) = row.coef_x * dl.value;
    }
  }
}

double shear_integral(const double* z, const double* s, std::size_t n, double zo) {
  if (n == 0 || !(zo <= 0.0)) return nan;
  const Bracket b = find_bracket(z, n, zo);
  if (!reaches(b, n)) return nan;
  std::vector<double> P(n);
  prefix_integrals(z, s, n, P.data());
  return integral_at(z, s, P.data(), b, zo);
}

// ---- GridTransfer -----------------------------------------------------------------------

namespace {
constexpr double node_tol_deg = 1e-9;  // a target this close to a source node takes the node
}  // namespace

GridTransfer::GridTransfer(const Grid& from, const Grid& to) : from_nx_(from.nx()) {
  const auto& fl = from.lat_deg();
  rows_.resize(to.ny());
  for (std::size_t j = 0; j < to.ny(); ++j) {
    const double x = to.lat_deg()[j];
    Weight w;
    for (std::size_t a = 0; a < fl.size(); ++a) {
      if (std::fabs(fl[a] - x) <= node_tol_deg) {
        w = {a, a, 0.0, true};
        break;
      }
      if (a + 1 < fl.size() && ((fl[a] < x && x < fl[a + 1]) || (fl[a] > x && x > fl[a + 1]))) {
        w = {a, a + 1, (x - fl[a]) / (fl[a + 1] - fl[a]), true};
        break;
      }
    }
    rows_[j] = w;
  }
  // Longitudes: source unwrapped (degrees, increasing from lon0); targets
  // reduced into [lon0, lon0 + 360).
  std::vector<double> src(from.nx());
  for (std::size_t i = 0; i < from.nx(); ++i) src[i] = from.lon_rad()[i] * 180.0 / 3.14159265358979323846;
  const double lon0 = src.front();
  cols_.resize(to.nx());
  for (std::size_t i = 0; i < to.nx(); ++i) {
    double x = std::fmod(to.lon_deg()[i] - lon0, 360.0);
    if (x < 0.0) x += 360.0;
    x += lon0;
    if (x - lon0 > 360.0 - node_tol_deg) x -= 360.0;  // on lon0 + 360: the first node
    Weight w;
    const auto it = std::upper_bound(src.begin(), src.end(), x);
    const std::size_t b = static_cast<std::size_t>(it - src.begin());  // src[b-1] <= x < src[b]
    if (b == 0) {
      if (std::fabs(src[0] - x) <= node_tol_deg) w = {0, 0, 0.0, true};
    } else if (std::fabs(src[b - 1] - x) <= node_tol_deg) {
      w = {b - 1, b - 1, 0.0, true};
    } else if (b < src.size() && std::fabs(src[b] - x) <= node_tol_deg) {
      w = {b, b, 0.0, true};
    } else if (b < src.size()) {
      w = {b - 1, b, (x - src[b - 1]) / (src[b] - src[b - 1]), true};
    } else if (from.periodic()) {  // between the last column and the first + 360
      const double span = src.front() + 360.0 - src.back();
      w = {src.size() - 1, 0, (x - src.back()) / span, true};
      if (std::fabs(x - src.back()) <= node_tol_deg) w = {src.size() - 1, src.size() - 1, 0.0, true};
    }
    cols_[i] = w;
  }
  identity_ = from.ny() == to.ny() && from.nx() == to.nx();
  for (std::size_t j = 0; identity_ && j < rows_.size(); ++j)
    identity_ = rows_[j].inside && rows_[j].w == 0.0 && rows_[j].a == j;
  for (std::size_t i = 0; identity_ && i < cols_.size(); ++i)
    identity_ = cols_[i].inside && cols_[i].w == 0.0 && cols_[i].a == i;
}

void GridTransfer::apply(const Field& src, const std::vector<std::uint8_t>& flags, Field& dst,
                         std::vector<std::uint8_t>& dst_flags) const {
  dst = Field(rows_.size(), cols_.size(), nan);
  dst_flags.assign(rows_.size() * cols_.size(), 0);
  for (std::size_t j = 0; j < rows_.size(); ++j) {
    const Weight& wj = rows_[j];
    if (!wj.inside) continue;
    for (std::size_t i = 0; i < cols_.size(); ++i) {
      const Weight& wi = cols_[i];
      if (!wi.inside) continue;
      // Bilinear; a corner with zero weight is not read (so a node stays exact).
      double sum = 0.0;
      std::uint8_t fl = 0;
      bool ok = true;
      const std::size_t ja[2] = {wj.a, wj.b}, ia[2] = {wi.a, wi.b};
      const double wy[2] = {1.0 - wj.w, wj.w}, wx[2] = {1.0 - wi.w, wi.w};
      for (int p = 0; p < 2 && ok; ++p)
        for (int q = 0; q < 2 && ok; ++q) {
          const double w = wy[p] * wx[q];
          if (w == 0.0) continue;
          const double x = src.at(ja[p], ia[q]);
          if (std::isnan(x)) ok = false;
          sum += w * x;
          fl = static_cast<std::uint8_t>(fl | flags[ja[p] * from_nx_ + ia[q]]);
        }
      dst_flags[j * cols_.size() + i] = fl;
      if (ok) dst.at(j, i) = sum;
    }
  }
}

// ---- TEOS-10 density ------------------------------------------------------------------

double in_situ_density(double t, double s, TemperatureKind tk, SalinityKind sk, double p) {
  const double sa = sk == SalinityKind::practical ? teos10::sr_from_sp(s) : s;  // SA ~ SR [3]
  const double ct = tk == TemperatureKind::potential ? teos10::ct_from_pt(sa, t) : t;
  return teos10::rho(sa, ct, p);
}

// ---- HydroReader ------------------------------------------------------------------------

namespace {

enum class Axis { none, lat, lon, time };

bool is_lat_units(const std::string& u) {
  const std::string s = lower(trim(u));
  return s == "degrees_north" || s == "degree_north" || s == "degree_n" || s == "degrees_n" ||
         s == "degreen" || s == "degreesn";
}
bool is_lon_units(const std::string& u) {
  const std::string s = lower(trim(u));
  return s == "degrees_east" || s == "degree_east" || s == "degree_e" || s == "degrees_e" ||
         s == "degreee" || s == "degreese";
}

// CF 4.1, 4.2, 4.4 (same rules as reader.cpp).
Axis classify_coordinate(int ncid, int varid) {
  const std::string units = text_att(ncid, varid, "units").value_or("");
  const std::string sn = trim(text_att(ncid, varid, "standard_name").value_or(""));
  const std::string axis = lower(trim(text_att(ncid, varid, "axis").value_or("")));
  const bool degrees = lower(trim(units)).rfind("degree", 0) == 0;
  if (is_lat_units(units) || sn == "latitude" || (axis == "y" && degrees)) return Axis::lat;
  if (is_lon_units(units) || sn == "longitude" || (axis == "x" && degrees)) return Axis::lon;
  const std::string lu = lower(trim(units));
  if (sn == "time" || axis == "t" || (lu.find(" since ") != std::string::npos)) return Axis::time;
  return Axis::none;
}

struct VarSummary {
  int id = -1;
  std::string name, standard_name;
  nc_type type = NC_NAT;
  std::vector<int> dims;
};

// CF standard names of the inputs [CF standard-name table v83].
const char* const sn_ct = "sea_water_conservative_temperature";
const char* const sn_pt = "sea_water_potential_temperature";
const char* const sn_t_insitu = "sea_water_temperature";
const char* const sn_sa = "sea_water_absolute_salinity";
const char* const sn_sr = "sea_water_reference_salinity";
const char* const sn_sp = "sea_water_practical_salinity";
const char* const sn_s_generic = "sea_water_salinity";
const char* const sn_rho = "sea_water_density";

bool is_potential_density_name(const std::string& sn) {
  return sn == "sea_water_potential_density" || sn == "sea_water_sigma_theta" ||
         sn == "sea_water_sigma_t" || sn.rfind("sea_water_sigma_theta_difference", 0) == 0;
}

// Unpacking and missing-data rules of one variable [CF 2.5.1, 8.1].
struct Unpack {
  int varid = -1;
  std::string name;
  double scale_factor = 1.0, add_offset = 0.0;
  double unsigned_wrap = 0.0;
  bool has_fill = false;
  double fill = 0.0;
  std::vector<double> missing;
  double vmin = -std::numeric_limits<double>::infinity();
  double vmax = std::numeric_limits<double>::infinity();
  double to_scale = 1.0, to_offset = 0.0;  // canonical = unpacked * to_scale + to_offset
};

double default_fill(nc_type t, bool& has) {
  has = true;
  switch (t) {
    case NC_SHORT: return NC_FILL_SHORT;
    case NC_USHORT: return NC_FILL_USHORT;
    case NC_INT: return NC_FILL_INT;
    case NC_UINT: return NC_FILL_UINT;
    case NC_INT64: return static_cast<double>(NC_FILL_INT64);
    case NC_UINT64: return static_cast<double>(NC_FILL_UINT64);
    case NC_FLOAT: return static_cast<double>(NC_FILL_FLOAT);
    case NC_DOUBLE: return NC_FILL_DOUBLE;
    default: has = false; return 0.0;  // byte types: no default fill (netCDF4-python habit)
  }
}

int type_bits(nc_type t) {
  switch (t) {
    case NC_BYTE: case NC_UBYTE: return 8;
    case NC_SHORT: case NC_USHORT: return 16;
    case NC_INT: case NC_UINT: case NC_FLOAT: return 32;
    default: return 64;
  }
}

}  // namespace

struct HydroReader::Impl {
  int ncid = -1;
  HydroInfo info;
  Unpack temperature, salinity, density;
  std::vector<int> dims;        // of the data variables
  int t_pos = -1, z_pos = -1;   // positions of time and vertical in dims (y, x are the last two)
  std::vector<double> buffer;

  ~Impl() {
    if (ncid >= 0) nc_close(ncid);
  }
  [[noreturn]] void fail(const std::string& variable, const std::string& problem) const {
    throw InputError(input_message(info.path, variable, problem));
  }
  void check(int status, const std::string& variable, const std::string& what) const {
    if (status != NC_NOERR) fail(variable, what + ": " + nc_strerror(status));
  }
  std::size_t dim_length(int dim) const {
    std::size_t n = 0;
    check(nc_inq_dimlen(ncid, dim, &n), "", "cannot read a dimension");
    return n;
  }
  std::string dim_name(int dim) const {
    char name[NC_MAX_NAME + 1] = {0};
    check(nc_inq_dimname(ncid, dim, name), "", "cannot read a dimension");
    return name;
  }
  std::string dims_text(const std::vector<int>& d) const {
    std::vector<std::string> parts;
    for (int x : d) parts.push_back(dim_name(x) + "=" + std::to_string(dim_length(x)));
    return "(" + join(parts, ", ") + ")";
  }

  std::vector<VarSummary> list_variables() const;
  const VarSummary* choose(const std::vector<VarSummary>& vars, const std::string& option,
                           const std::vector<const char*>& names, const char* what,
                           std::string& reason) const;
  CoordVar read_coordinate(const VarSummary& v) const;
  void resolve_layout(const VarSummary& ref, const std::vector<VarSummary>& vars);
  void resolve_vertical(const VarSummary& zv);
  Unpack resolve_unpack(const VarSummary& v, const char* target, const std::string& units,
                        bool practical) const;
};

std::vector<VarSummary> HydroReader::Impl::list_variables() const {
  int nvars = 0;
  check(nc_inq_nvars(ncid, &nvars), "", "cannot list variables");
  std::vector<VarSummary> out;
  for (int v = 0; v < nvars; ++v) {
    VarSummary s;
    s.id = v;
    char name[NC_MAX_NAME + 1] = {0};
    int nd = 0;
    check(nc_inq_var(ncid, v, name, &s.type, &nd, nullptr, nullptr), "", "cannot read a variable");
    s.name = name;
    s.dims.resize(static_cast<std::size_t>(nd));
    if (nd) check(nc_inq_vardimid(ncid, v, s.dims.data()), s.name, "cannot read its dimensions");
    s.standard_name = trim(text_att(ncid, v, "standard_name").value_or(""));
    out.push_back(std::move(s));
  }
  return out;
}

// Picks the variable for OPTION (a name) or by the first of NAMES that
// exactly one variable carries. Returns nullptr when none.
const VarSummary* HydroReader::Impl::choose(const std::vector<VarSummary>& vars,
                                            const std::string& option,
                                            const std::vector<const char*>& names, const char* what,
                                            std::string& reason) const {
  if (!option.empty()) {
    for (const auto& v : vars) {
      if (v.name != option) continue;
      for (const char* n : names)
        if (v.standard_name == n) {
          reason = "chosen by option, standard_name " + v.standard_name;
          return &v;
        }
      fail(v.name, std::string("chosen as ") + what + " but its standard_name is '" +
                       v.standard_name + "', not one of " + join({names.begin(), names.end()}, ", ") +
                       " (set it, e.g. with ncatted, so the kind of " + what + " is known)");
    }
    fail(option, std::string("not found in the file (chosen as ") + what + ")");
  }
  for (const char* n : names) {
    std::vector<const VarSummary*> hits;
    for (const auto& v : vars)
      if (v.standard_name == n && v.dims.size() >= 3) hits.push_back(&v);
    if (hits.size() > 1) {
      std::vector<std::string> list;
      for (const auto* h : hits) list.push_back(h->name);
      fail("", std::string("several variables have standard_name ") + n + ": " + join(list, ", ") +
                   "; choose one with the matching option");
    }
    if (hits.size() == 1) {
      reason = std::string("standard_name ") + n;
      return hits[0];
    }
  }
  return nullptr;
}

CoordVar HydroReader::Impl::read_coordinate(const VarSummary& v) const {
  CoordVar c;
  c.name = v.name;
  c.dim = dim_name(v.dims[0]);
  c.nc_type = v.type;
  c.attrs = copy_attributes(ncid, v.id);
  const std::size_t n = dim_length(v.dims[0]);
  if (n == 0) fail(v.name, "dimension " + c.dim + " is empty");
  if (!is_numeric_type(v.type)) fail(v.name, "coordinate variable is not numeric");
  c.values.resize(n);
  check(nc_get_var_double(ncid, v.id, c.values.data()), v.name, "cannot read its values");
  const auto sf = number_att(ncid, v.id, "scale_factor");
  const auto ao = number_att(ncid, v.id, "add_offset");
  const double scale = sf && !sf->empty() ? (*sf)[0] : 1.0;
  const double offset = ao && !ao->empty() ? (*ao)[0] : 0.0;
  for (double& x : c.values) {
    x = x * scale + offset;
    if (!std::isfinite(x)) fail(v.name, "coordinate holds a non-finite value");
  }
  return c;
}

void HydroReader::Impl::resolve_vertical(const VarSummary& zv) {
  info.vertical = read_coordinate(zv);
  const std::string units = trim(text_att(ncid, zv.id, "units").value_or(""));
  if (units.empty())
    fail(zv.name, "vertical coordinate has no units (m for depth or dbar for pressure needed)");
  double scale = 1.0, offset = 0.0;
  std::string how;
  if (unit_converter(units, "m", scale, offset)) {
    info.vertical_kind = VerticalKind::depth;
  } else if (unit_converter(units, "dbar", scale, offset)) {
    info.vertical_kind = VerticalKind::pressure;
  } else {
    fail(zv.name, "vertical coordinate units '" + units +
                      "' are neither a length (depth, m) nor a pressure (dbar)");
  }
  info.vertical_scale = scale;
  info.vertical_offset = offset;
  const std::string positive = lower(trim(text_att(ncid, zv.id, "positive").value_or("")));
  const std::string sn = trim(text_att(ncid, zv.id, "standard_name").value_or(""));
  const auto& raw = info.vertical.values;
  if (info.vertical_kind == VerticalKind::pressure) {
    if (!positive.empty() && positive != "down")
      fail(zv.name, "pressure coordinate with positive=\"" + positive + "\" (pressure increases down)");
    info.vertical_sign = 1.0;
    how = "pressure units " + units + " (sea pressure, dbar; positive down)";
  } else if (positive == "down" || positive == "up") {
    info.vertical_sign = positive == "down" ? 1.0 : -1.0;
    how = "positive=\"" + positive + "\", units " + units;
  } else if (!positive.empty()) {
    fail(zv.name, "positive=\"" + positive + "\" is not \"up\" or \"down\" (CF 4.3)");
  } else if (sn == "depth") {
    info.vertical_sign = 1.0;
    how = "standard_name depth (positive down), units " + units;
  } else if (sn == "height" || sn == "altitude") {
    info.vertical_sign = -1.0;
    how = "standard_name " + sn + " (positive up), units " + units;
  } else {
    bool all_ge = true, all_le = true;
    for (double x : raw) {
      all_ge = all_ge && x * scale + offset >= 0.0;
      all_le = all_le && x * scale + offset <= 0.0;
    }
    if (all_ge) {
      info.vertical_sign = 1.0;
      how = "no positive attribute; values >= 0 taken as depth (positive down), units " + units;
    } else if (all_le) {
      info.vertical_sign = -1.0;
      how = "no positive attribute; values <= 0 taken as height (positive up), units " + units;
    } else {
      fail(zv.name, "vertical coordinate has no positive attribute and values of both signs "
                    "(add positive=\"down\" or \"up\", CF 4.3)");
    }
  }
  info.vertical_reason = how;
  info.levels.resize(raw.size());
  for (std::size_t k = 0; k < raw.size(); ++k) {
    const double d = info.vertical_sign * (raw[k] * scale + offset);
    // A level a hair above the surface (-0 written as -1e-12) counts as the surface.
    if (d < -1e-6)
      fail(zv.name, "level " + number_text(raw[k]) + " " + units + " lies above the sea surface");
    info.levels[k] = std::max(d, 0.0);
  }
  bool up = true, down = true;
  for (std::size_t k = 1; k < info.levels.size(); ++k) {
    up = up && info.levels[k] > info.levels[k - 1];
    down = down && info.levels[k] < info.levels[k - 1];
  }
  if (!up && !down) fail(zv.name, "levels are not strictly monotonic");
  info.order.resize(info.levels.size());
  for (std::size_t k = 0; k < info.order.size(); ++k) info.order[k] = up ? k : info.order.size() - 1 - k;
}

void HydroReader::Impl::resolve_layout(const VarSummary& ref, const std::vector<VarSummary>& vars) {
  // Coordinate variables of each dimension.
  const VarSummary* lat = nullptr;
  const VarSummary* lon = nullptr;
  const VarSummary* time = nullptr;
  const VarSummary* vertical = nullptr;
  int lat_dim = -1, lon_dim = -1, time_dim = -1, z_dim = -1;
  for (int d : ref.dims) {
    for (const auto& v : vars) {
      if (v.dims.size() != 1 || v.dims[0] != d) continue;
      const Axis a = classify_coordinate(ncid, v.id);
      if (a == Axis::lat && !lat) { lat = &v; lat_dim = d; }
      else if (a == Axis::lon && !lon) { lon = &v; lon_dim = d; }
      else if (a == Axis::time && !time) { time = &v; time_dim = d; }
    }
  }
  if (!lat || !lon)
    fail(ref.name, "no 1-D latitude/longitude coordinate variables on its dimensions " +
                       dims_text(ref.dims) + " (curvilinear grids are not supported)");
  // The vertical dimension: the one left that has a coordinate variable of its name.
  std::vector<int> others;
  for (int d : ref.dims)
    if (d != lat_dim && d != lon_dim && d != time_dim) others.push_back(d);
  for (int d : others) {
    const std::string dn = dim_name(d);
    for (const auto& v : vars)
      if (v.dims.size() == 1 && v.dims[0] == d &&
          (v.name == dn || lower(trim(text_att(ncid, v.id, "axis").value_or(""))) == "z")) {
        vertical = &v;
        z_dim = d;
        break;
      }
    if (vertical) break;
  }
  if (!vertical) {
    // A size-1 dimension without coordinate is dropped; a vertical one is required.
    fail(ref.name, "no vertical coordinate variable (depth or pressure) on its dimensions " +
                       dims_text(ref.dims));
  }
  // Required order: [leading size-1 dims] [time] vertical lat lon.
  const std::size_t nd = ref.dims.size();
  if (nd < 3 || ref.dims[nd - 1] != lon_dim || ref.dims[nd - 2] != lat_dim ||
      ref.dims[nd - 3] != z_dim)
    fail(ref.name, "layout " + dims_text(ref.dims) +
                       " is not supported (expected (level, lat, lon) or (time, level, lat, lon))");
  std::size_t lead = nd - 3;
  if (time_dim >= 0) {
    if (lead == 0 || ref.dims[lead - 1] != time_dim)
      fail(ref.name, "layout " + dims_text(ref.dims) + " is not supported (time must come first)");
    t_pos = static_cast<int>(lead - 1);
    --lead;
  }
  for (std::size_t k = 0; k < lead; ++k)
    if (dim_length(ref.dims[k]) != 1)
      fail(ref.name, "layout " + dims_text(ref.dims) + " has an extra dimension of size > 1");
  z_pos = static_cast<int>(nd - 3);
  dims = ref.dims;
  info.lat = read_coordinate(*lat);
  info.lon = read_coordinate(*lon);
  if (time) {
    info.time = read_coordinate(*time);
    info.calendar = trim(text_att(ncid, time->id, "calendar").value_or("standard"));
    info.nt = info.time->values.size();
  }
  resolve_vertical(*vertical);
  info.nz = info.levels.size();
  info.ny = info.lat.values.size();
  info.nx = info.lon.values.size();
}

Unpack HydroReader::Impl::resolve_unpack(const VarSummary& v, const char* target,
                                         const std::string& units, bool practical) const {
  Unpack u;
  u.varid = v.id;
  u.name = v.name;
  if (!is_numeric_type(v.type)) fail(v.name, "is not numeric");
  if (v.dims != dims)
    fail(v.name, "its dimensions " + dims_text(v.dims) + " differ from " + dims_text(dims));
  const auto sf = number_att(ncid, v.id, "scale_factor");
  const auto ao = number_att(ncid, v.id, "add_offset");
  if ((sf && sf->empty()) || (ao && ao->empty())) fail(v.name, "scale_factor/add_offset is not a number");
  if (sf) u.scale_factor = (*sf)[0];
  if (ao) u.add_offset = (*ao)[0];
  const std::string uns = lower(trim(text_att(ncid, v.id, "_Unsigned").value_or("")));
  if (uns == "true" && (v.type == NC_BYTE || v.type == NC_SHORT || v.type == NC_INT || v.type == NC_INT64))
    u.unsigned_wrap = std::ldexp(1.0, type_bits(v.type));
  if (const auto fv = number_att(ncid, v.id, "_FillValue")) {
    if (fv->empty()) fail(v.name, "_FillValue is not a number");
    u.has_fill = true;
    u.fill = (*fv)[0];
  } else {
    u.fill = default_fill(v.type, u.has_fill);
  }
  if (const auto mv = number_att(ncid, v.id, "missing_value")) u.missing = *mv;
  if (const auto vr = number_att(ncid, v.id, "valid_range"); vr && vr->size() == 2) {
    u.vmin = (*vr)[0];
    u.vmax = (*vr)[1];
  }
  if (const auto a = number_att(ncid, v.id, "valid_min"); a && !a->empty()) u.vmin = (*a)[0];
  if (const auto a = number_att(ncid, v.id, "valid_max"); a && !a->empty()) u.vmax = (*a)[0];
  if (u.unsigned_wrap > 0.0) {
    const auto wrap = [&](double& x) { if (x < 0.0) x += u.unsigned_wrap; };
    wrap(u.fill);
    for (double& x : u.missing) wrap(x);
  }
  if (practical) {
    // PSS-78 is unitless; these spellings are common for it (CF: "1").
    const std::string s = lower(trim(units));
    if (!(s.empty() || s == "1" || s == "psu" || s == "pss-78" || s == "pss78" || s == "0.001" ||
          s == "1e-3" || s == "practical_salinity_unit" || s == "pss"))
      fail(v.name, "units '" + units + "' are not those of Practical Salinity (1, psu, PSS-78)");
    return u;
  }
  if (trim(units).empty()) fail(v.name, std::string("has no units (") + target + " expected)");
  if (std::string(target) == "g/kg") {
    const std::string s = lower(trim(units));
    if (s == "1" || s == "psu" || s == "pss-78")
      fail(v.name, "units '" + units + "' for an absolute/reference salinity (g/kg expected)");
  }
  if (!unit_converter(units, target, u.to_scale, u.to_offset))
    fail(v.name, "units '" + units + "' cannot be converted to " + target + " (UDUNITS-2)");
  return u;
}

HydroReader::HydroReader(const std::string& path, const HydroOptions& options)
    : impl_(std::make_unique<Impl>()) {
  Impl& m = *impl_;
  m.info.path = path;
  int id = -1;
  const int status = nc_open(path.c_str(), NC_NOWRITE, &id);
  if (status != NC_NOERR) m.fail("", std::string("cannot be opened as netCDF (") + nc_strerror(status) + ")");
  m.ncid = id;
  int format = 0;
  m.check(nc_inq_format(m.ncid, &format), "", "cannot read the file format");
  switch (format) {
    case NC_FORMAT_CLASSIC: m.info.format = "classic"; break;
    case NC_FORMAT_64BIT_OFFSET: m.info.format = "64-bit offset"; break;
    case NC_FORMAT_CDF5: m.info.format = "CDF5"; break;
    case NC_FORMAT_NETCDF4: m.info.format = "netCDF-4"; break;
    case NC_FORMAT_NETCDF4_CLASSIC: m.info.format = "netCDF-4 classic model"; break;
    default: m.info.format = "unknown"; break;
  }
  m.info.global_attrs = copy_attributes(m.ncid, NC_GLOBAL);
  const auto vars = m.list_variables();

  std::string t_reason, s_reason, d_reason;
  const VarSummary* tv = nullptr;
  const VarSummary* sv = nullptr;
  const VarSummary* dv = nullptr;
  if (options.density.empty()) {
    tv = m.choose(vars, options.temperature, {sn_ct, sn_pt}, "temperature", t_reason);
    sv = m.choose(vars, options.salinity, {sn_sa, sn_sr, sn_sp, sn_s_generic}, "salinity", s_reason);
  }
  if (!tv || !sv) dv = m.choose(vars, options.density, {sn_rho}, "density", d_reason);
  if (!dv && (!tv || !sv)) {
    bool insitu_t = false, pot_rho = false;
    for (const auto& v : vars) {
      insitu_t = insitu_t || v.standard_name == sn_t_insitu;
      pot_rho = pot_rho || is_potential_density_name(v.standard_name);
    }
    std::string problem;
    if (!tv)
      problem = insitu_t ? "only in-situ temperature (sea_water_temperature) found; give "
                           "sea_water_conservative_temperature or sea_water_potential_temperature"
                         : "no temperature variable (standard_name "
                           "sea_water_conservative_temperature or sea_water_potential_temperature)";
    else
      problem = "no salinity variable (standard_name sea_water_absolute_salinity, "
                "sea_water_reference_salinity, sea_water_practical_salinity or sea_water_salinity)";
    problem += "; and no in-situ density (sea_water_density) either";
    if (pot_rho)
      problem += "; potential density is refused: thermal wind needs in-situ density gradients";
    m.fail("", problem);
  }

  const VarSummary& ref = dv ? *dv : *tv;
  m.resolve_layout(ref, vars);
  if (dv) {
    m.info.from_density = true;
    m.info.density = dv->name;
    m.info.density_reason = d_reason;
    m.info.density_units = trim(text_att(m.ncid, dv->id, "units").value_or(""));
    m.density = m.resolve_unpack(*dv, "kg m-3", m.info.density_units, false);
  } else {
    m.info.temperature = tv->name;
    m.info.salinity = sv->name;
    m.info.temperature_kind =
        tv->standard_name == sn_ct ? TemperatureKind::conservative : TemperatureKind::potential;
    if (sv->standard_name == sn_sa) m.info.salinity_kind = SalinityKind::absolute;
    else if (sv->standard_name == sn_sr) m.info.salinity_kind = SalinityKind::reference;
    else m.info.salinity_kind = SalinityKind::practical;
    m.info.temperature_units = trim(text_att(m.ncid, tv->id, "units").value_or(""));
    m.info.salinity_units = trim(text_att(m.ncid, sv->id, "units").value_or(""));
    m.info.temperature_reason =
        t_reason + (m.info.temperature_kind == TemperatureKind::potential
                        ? "; potential temperature converted to Conservative Temperature (gsw_CT_from_pt)"
                        : "");
    m.info.salinity_reason =
        s_reason + (m.info.salinity_kind == SalinityKind::practical
                        ? std::string(sv->standard_name == sn_s_generic
                                          ? "; taken as Practical Salinity (PSS-78)"
                                          : "") +
                              "; SA = SR = (35.16504/35) SP, the Absolute Salinity Anomaly "
                              "neglected (TEOS-10 manual section 2.4)"
                        : m.info.salinity_kind == SalinityKind::reference
                              ? "; reference salinity used as Absolute Salinity"
                              : "");
    m.temperature = m.resolve_unpack(*tv, "degC", m.info.temperature_units, false);
    m.salinity = m.resolve_unpack(*sv, "g/kg", m.info.salinity_units,
                                  m.info.salinity_kind == SalinityKind::practical);
  }
}

HydroReader::~HydroReader() = default;
HydroReader::HydroReader(HydroReader&&) noexcept = default;
HydroReader& HydroReader::operator=(HydroReader&&) noexcept = default;

const HydroInfo& HydroReader::info() const { return impl_->info; }

void HydroReader::read_levels(HydroField which, std::size_t t, std::size_t j0, std::size_t n,
                              std::vector<Field>& out) {
  Impl& m = *impl_;
  const HydroInfo& in = m.info;
  const Unpack* u = which == HydroField::temperature ? &m.temperature
                    : which == HydroField::salinity  ? &m.salinity
                                                     : &m.density;
  if (u->varid < 0) m.fail("", "no such field in this file (a caller bug)");
  if (t >= in.nt || j0 + n > in.ny) throw std::out_of_range("HydroReader::read_levels: bad step or rows");
  out.resize(in.nz);
  for (auto& f : out) f = Field(n, in.nx, nan);
  if (n == 0) return;
  const std::size_t nd = m.dims.size();
  std::vector<std::size_t> start(nd, 0), count(nd, 1);
  if (m.t_pos >= 0) start[static_cast<std::size_t>(m.t_pos)] = t;
  count[nd - 3] = in.nz;
  start[nd - 2] = j0;
  count[nd - 2] = n;
  count[nd - 1] = in.nx;
  const std::size_t per_level = n * in.nx;
  m.buffer.resize(in.nz * per_level);
  m.check(nc_get_vara_double(m.ncid, u->varid, start.data(), count.data(), m.buffer.data()),
          u->name, "cannot read data");
  for (std::size_t k = 0; k < in.nz; ++k) {
    const double* src = m.buffer.data() + in.order[k] * per_level;
    double* dst = out[k].data.data();
    for (std::size_t c = 0; c < per_level; ++c) {
      double raw = src[c];
      if (!std::isfinite(raw)) continue;
      if (u->unsigned_wrap > 0.0 && raw < 0.0) raw += u->unsigned_wrap;
      if (u->has_fill && raw == u->fill) continue;
      if (std::find(u->missing.begin(), u->missing.end(), raw) != u->missing.end()) continue;
      if (raw < u->vmin || raw > u->vmax) continue;
      dst[c] = (raw * u->scale_factor + u->add_offset) * u->to_scale + u->to_offset;
    }
  }
}

CivilTime HydroReader::date(std::size_t t) const {
  const HydroInfo& in = impl_->info;
  if (!in.time) impl_->fail("", "has no time coordinate");
  if (t >= in.nt) throw std::out_of_range("HydroReader::date");
  try {
    return decode_cf_time(in.time->values[t], attr_text(in.time->attrs, "units"), in.calendar);
  } catch (const std::invalid_argument& e) {
    impl_->fail(in.time->name, e.what());
  }
}

// ---- sections ------------------------------------------------------------------------------

SectionProfile section_profile(std::size_t nseg, std::size_t nlev, const std::vector<double>& seg_length,
                               const std::vector<double>& azimuth_deg, const std::vector<double>& u,
                               const std::vector<double>& v, const std::vector<double>& z,
                               const std::vector<double>& u_top, const std::vector<double>& v_top) {
  const std::size_t ns = nseg + 1;
  if (seg_length.size() != nseg || azimuth_deg.size() != nseg || u.size() != nlev * ns ||
      v.size() != nlev * ns || z.size() != nlev * nseg ||
      !((u_top.empty() && v_top.empty()) || (u_top.size() == ns && v_top.size() == ns)))
    throw std::invalid_argument("section_profile: inconsistent sizes");
  SectionProfile r;
  r.normal_velocity.assign(nlev * nseg, nan);
  r.transport_per_depth.assign(nlev, nan);
  std::vector<double> ca(nseg), sa(nseg);
  for (std::size_t q = 0; q < nseg; ++q) {
    double sn = 0, cs = 0;
    sincosd(azimuth_deg[q], sn, cs);
    ca[q] = cs;
    sa[q] = sn;
  }
  // v_n = (u, v) . n with n = k x t = (-cos az, sin az): positive to the left of the walk.
  auto normal = [&](double uu, double vv, std::size_t q) { return -uu * ca[q] + vv * sa[q]; };
  for (std::size_t k = 0; k < nlev; ++k) {
    double t = 0.0;
    bool any = false;
    for (std::size_t q = 0; q < nseg; ++q) {
      const double ua = u[k * ns + q], ub = u[k * ns + q + 1];
      const double va = v[k * ns + q], vb = v[k * ns + q + 1];
      if (!(std::isfinite(ua) && std::isfinite(ub) && std::isfinite(va) && std::isfinite(vb))) continue;
      const double vn = normal(0.5 * (ua + ub), 0.5 * (va + vb), q);
      r.normal_velocity[k * nseg + q] = vn;
      t += vn * seg_length[q];  // T_k = sum v_n ds  (m2 s-1)
      any = true;
    }
    if (any) r.transport_per_depth[k] = t;
  }
  double total = 0.0, length = 0.0, excluded = 0.0;
  for (std::size_t q = 0; q < nseg; ++q) {
    length += seg_length[q];
    const double v0 = nlev ? r.normal_velocity[q] : nan;
    if (std::isnan(v0)) {
      excluded += seg_length[q];
      continue;
    }
    // Top slab, surface (z = 0) to the first level.
    double top = v0;
    if (!u_top.empty()) {
      const double ua = u_top[q], ub = u_top[q + 1], va = v_top[q], vb = v_top[q + 1];
      if (std::isfinite(ua) && std::isfinite(ub) && std::isfinite(va) && std::isfinite(vb))
        top = normal(0.5 * (ua + ub), 0.5 * (va + vb), q);
    }
    double column = 0.5 * (top + v0) * (0.0 - z[q]);  // int v_n dz, m2 s-1 (trapezoid)
    for (std::size_t k = 0; k + 1 < nlev; ++k) {
      const double a = r.normal_velocity[k * nseg + q], b = r.normal_velocity[(k + 1) * nseg + q];
      if (std::isnan(b)) break;  // the sea floor of this segment
      column += 0.5 * (a + b) * (z[k * nseg + q] - z[(k + 1) * nseg + q]);
    }
    total += column * seg_length[q];
  }
  r.transport = length > excluded ? total : nan;
  r.excluded_fraction = length > 0 ? excluded / length : 1.0;
  return r;
}

// ---- output catalogue --------------------------------------------------------------------

const std::vector<std::string>& profile_field_names() {
  static const std::vector<std::string> names = {"density", "du_dz", "dv_dz"};
  return names;
}

std::vector<std::string> parse_profile_fields(const std::string& list) {
  const auto& all = profile_field_names();
  const std::string l = trim(list);
  if (l.empty() || l == "all") return all;
  std::vector<std::string> out;
  std::stringstream ss(l);
  std::string item;
  while (std::getline(ss, item, ',')) {
    item = trim(item);
    if (item.empty() || item == "u" || item == "v" || item == "quality") continue;
    if (item == "all") return all;
    if (std::find(all.begin(), all.end(), item) == all.end())
      throw UsageError("--fields: unknown field '" + item + "' (known: u, v, quality, " +
                       join(all, ", ") + ")");
    if (std::find(out.begin(), out.end(), item) == out.end()) out.push_back(item);
  }
  return out;
}

namespace {

const char* profile_caution() {
  return "Geostrophic currents at depth from the thermal-wind relation (hydrography), anchored "
         "to a reference. They are not total currents: Ekman, tidal, inertial and wave-driven "
         "flows, and any flow the hydrography does not resolve, are absent; the balance fails "
         "near the equator, at coasts and steep topography. Not for navigation or safety-of-life "
         "decisions. About the surface reference: ";
}

std::string now_iso() {
  std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

// ---- 4-D writer: temporary sibling, CF attributes, rename on commit ----------------

std::uint32_t random_bits() {
  try {
    std::random_device rd;
    return static_cast<std::uint32_t>(rd());
  } catch (...) {
    return static_cast<std::uint32_t>(std::chrono::steady_clock::now().time_since_epoch().count());
  }
}


bool skipped_coordinate_attribute(const std::string& n) {
  return n.empty() || n[0] == '_' || n == "scale_factor" || n == "add_offset" ||
         n == "missing_value" || n == "valid_min" || n == "valid_max" || n == "valid_range" ||
         n == "bounds" || n == "climatology";
}

constexpr float float_fill = NC_FILL_FLOAT;  // 9.96921e36, REFERENCES.md section 9

struct OutVar {
  std::string name;
  bool flags = false;
  bool four_d = true;
  std::vector<Attribute> attrs;
  int varid = -1;
  bool as_double = false;  // NC_DOUBLE (small section variables) instead of NC_FLOAT
};

class ProfileWriter {
public:
  ProfileWriter(std::string path, bool force) : path_(std::move(path)), force_(force) {}
  ProfileWriter(const ProfileWriter&) = delete;
  ProfileWriter& operator=(const ProfileWriter&) = delete;
  ~ProfileWriter() { discard(); }

  void create() {
    const auto slash = path_.rfind('/');
    const std::string folder = slash == std::string::npos ? "." : (slash == 0 ? "/" : path_.substr(0, slash));
    const std::string name = path_.substr(slash == std::string::npos ? 0 : slash + 1);
    if (name.empty() || name == "." || name == "..") fail("", "output is not a file name");
    struct stat st {};
    if (::stat(folder.c_str(), &st) != 0) fail("", "output folder " + folder + ": " + std::strerror(errno));
    if (!S_ISDIR(st.st_mode)) fail("", "output folder " + folder + ": not a folder");
    if (::access(folder.c_str(), W_OK | X_OK) != 0)
      fail("", "output folder " + folder + ": " + std::strerror(errno));
    if (::lstat(path_.c_str(), &st) == 0) {
      struct stat target {};
      if (::stat(path_.c_str(), &target) == 0 && S_ISDIR(target.st_mode)) fail("", "output is a folder");
      if (!force_) fail("", "output exists (use --force to overwrite)");
    }
    const std::string prefix = slash == std::string::npos ? std::string() : path_.substr(0, slash + 1);
    int status = NC_NOERR;
    for (int attempt = 0; attempt < 4; ++attempt) {
      char tag[32];
      std::snprintf(tag, sizeof tag, "%ld-%08x", static_cast<long>(::getpid()),
                    static_cast<unsigned>(random_bits()));
      tmp_ = prefix + "." + name + ".tmp-" + tag;
      status = nc_create(tmp_.c_str(), NC_NETCDF4 | NC_NOCLOBBER, &ncid_);
      if (status == NC_NOERR) {
        open_ = tmp_exists_ = true;
        return;
      }
      if (status != NC_EEXIST && status != EEXIST) break;
    }
    fail("", std::string("cannot create temporary file ") + tmp_ + ": " + nc_strerror(status));
  }

  void check(int status, const std::string& var, const std::string& action) const {
    if (status != NC_NOERR) fail(var, std::string(nc_strerror(status)) + " (" + action + ")");
  }

  void put_attribute(int varid, const std::string& owner, const Attribute& a) const {
    if (a.nc_type == NC_CHAR || a.nc_type == NC_STRING)
      check(nc_put_att_text(ncid_, varid, a.name.c_str(), a.text.size(), a.text.c_str()), owner,
            "writing attribute " + a.name);
    else
      check(nc_put_att_double(ncid_, varid, a.name.c_str(), a.nc_type, a.values.size(), a.values.data()),
            owner, "writing attribute " + a.name);
  }

  int define_dimension(const std::string& name, std::size_t len) {
    int id = -1;
    check(nc_def_dim(ncid_, name.c_str(), len, &id), name, "defining dimension");
    return id;
  }

  // Coordinate variable; TYPE kept for float/double storage, else double.
  int define_coordinate(const CoordVar& c, int dimid, bool force_double) {
    const int type = (!force_double && (c.nc_type == NC_FLOAT || c.nc_type == NC_DOUBLE)) ? c.nc_type : NC_DOUBLE;
    int id = -1;
    check(nc_def_var(ncid_, c.name.c_str(), type, 1, &dimid, &id), c.name, "defining coordinate");
    for (const auto& a : c.attrs)
      if (!skipped_coordinate_attribute(a.name)) put_attribute(id, c.name, a);
    return id;
  }

  void define(OutVar& v, const int* dims, int ndims, const std::size_t* chunks, int deflate) {
    check(nc_def_var(ncid_, v.name.c_str(), v.flags ? NC_UBYTE : (v.as_double ? NC_DOUBLE : NC_FLOAT),
                     ndims, dims, &v.varid),
          v.name, "defining variable");
    if (ndims > 0) {  // a scalar is stored contiguously
      check(nc_def_var_chunking(ncid_, v.varid, NC_CHUNKED, chunks), v.name, "setting chunking");
      if (deflate > 0) check(nc_def_var_deflate(ncid_, v.varid, 1, 1, deflate), v.name, "setting deflate");
      std::size_t bytes = (v.flags ? 1 : (v.as_double ? 8 : 4));
      for (int d = 0; d < ndims; ++d) bytes *= chunks[d];
      check(nc_set_var_chunk_cache(ncid_, v.varid, 2 * bytes + 1024, 11, 0.75f), v.name,
            "setting chunk cache");
    }
    if (v.as_double) {
      const double fill = NC_FILL_DOUBLE;
      check(nc_def_var_fill(ncid_, v.varid, NC_FILL, &fill), v.name, "setting _FillValue");
    } else if (!v.flags) {
      const float fill = float_fill;
      check(nc_def_var_fill(ncid_, v.varid, NC_FILL, &fill), v.name, "setting _FillValue");
    }
    for (const auto& a : v.attrs) put_attribute(v.varid, v.name, a);
  }

  void end_define() { check(nc_enddef(ncid_), "", "leaving define mode"); }

  void put_coordinate(int varid, const std::string& name, const std::vector<double>& values) {
    // vara with an explicit count: nc_put_var on a record variable writes only the
    // records that exist yet (none).
    const std::size_t start = 0, count = values.size();
    check(nc_put_vara_double(ncid_, varid, &start, &count, values.data()), name, "writing coordinate");
  }

  // Writes N values at START/COUNT (NaN and non-finite -> _FillValue).
  void put_floats(const OutVar& v, const std::size_t* start, const std::size_t* count,
                  const double* values, std::size_t n) {
    fbuf_.resize(n);
    for (std::size_t c = 0; c < n; ++c) {
      const double x = values[c];
      fbuf_[c] = (std::isfinite(x) && std::fabs(x) <= static_cast<double>(std::numeric_limits<float>::max()))
                     ? static_cast<float>(x)
                     : float_fill;
    }
    check(nc_put_vara_float(ncid_, v.varid, start, count, fbuf_.data()), v.name, "writing data");
  }
  // Doubles (NaN -> NC_FILL_DOUBLE).
  void put_doubles(const OutVar& v, const std::size_t* start, const std::size_t* count,
                   const double* values, std::size_t n) {
    dbuf_.assign(values, values + n);
    for (double& x : dbuf_)
      if (!std::isfinite(x)) x = NC_FILL_DOUBLE;
    check(nc_put_vara_double(ncid_, v.varid, start, count, dbuf_.data()), v.name, "writing data");
  }
  void put_flags(const OutVar& v, const std::size_t* start, const std::size_t* count,
                 const std::uint8_t* values) {
    check(nc_put_vara_uchar(ncid_, v.varid, start, count, values), v.name, "writing data");
  }

  void set_global_text(const std::string& name, const std::string& value) {
    check(nc_put_att_text(ncid_, NC_GLOBAL, name.c_str(), value.size(), value.c_str()), "",
          "writing global attribute " + name);
  }

  void commit() {
    open_ = false;
    const int status = nc_close(ncid_);
    if (status != NC_NOERR) {
      discard();
      fail("", std::string(nc_strerror(status)) + " (closing)");
    }
    if (const int err = sync_path(tmp_, false); err != 0) {
      discard();
      fail("", std::string("flushing to disk: ") + std::strerror(err));
    }
    const int err = force_ ? (std::rename(tmp_.c_str(), path_.c_str()) == 0 ? 0 : errno)
                           : rename_noreplace(tmp_, path_);
    if (err != 0) {
      discard();
      fail("", err == EEXIST ? std::string("output exists (use --force to overwrite)")
                             : "renaming " + tmp_ + ": " + std::strerror(err));
    }
    tmp_exists_ = false;
    const auto slash = path_.rfind('/');
    sync_path(slash == std::string::npos ? "." : (slash == 0 ? "/" : path_.substr(0, slash)), true);
  }

  int ncid() const { return ncid_; }

private:
  [[noreturn]] void fail(const std::string& var, const std::string& problem) const {
    throw OutputError(input_message(path_, var, problem));
  }
  void discard() noexcept {
    if (open_) {
      nc_close(ncid_);
      open_ = false;
    }
    if (tmp_exists_) {
      ::unlink(tmp_.c_str());
      tmp_exists_ = false;
    }
  }
  std::string path_, tmp_;
  bool force_ = false, open_ = false, tmp_exists_ = false;
  int ncid_ = -1;
  std::vector<float> fbuf_;
  std::vector<double> dbuf_;
};

Grid make_grid(const std::string& path, const std::string& var, const CoordVar& lat,
               const CoordVar& lon) {
  try {
    return Grid(lat.values, lon.values);
  } catch (const std::invalid_argument& e) {
    throw InputError(input_message(path, var, e.what()));
  }
}

std::string reference_text(const ThermalReference& r, VerticalKind vk) {
  if (r.kind == ThermalReference::surface) return "surface geostrophic velocity from sea-surface height";
  return "level of no motion at " + number_text(r.level) + (vk == VerticalKind::pressure ? " dbar" : " m");
}

}  // namespace

// ---- run_profile -------------------------------------------------------------------------

ProfileSummary run_profile(const ProfileJob& job) {
  validate(job.options);
  if (job.deflate < 0 || job.deflate > 9)
    throw UsageError("--deflate: " + std::to_string(job.deflate) + " is outside 0..9");
  const bool surface_ref = job.reference.kind == ThermalReference::surface;
  if (surface_ref && job.heights.empty())
    throw UsageError("a height file is needed with --reference surface (or use no-motion:LEVEL)");
  const bool want_density = std::find(job.fields.begin(), job.fields.end(), "density") != job.fields.end();
  const bool want_du = std::find(job.fields.begin(), job.fields.end(), "du_dz") != job.fields.end();
  const bool want_dv = std::find(job.fields.begin(), job.fields.end(), "dv_dz") != job.fields.end();

  // ---- hydrography, levels ----
  HydroReader hydro(job.hydrography, job.hydro);
  const HydroInfo& hi = hydro.info();
  const std::string hvar = hi.from_density ? hi.density : hi.temperature;
  const Grid grid = make_grid(hi.path, hvar, hi.lat, hi.lon);
  const std::size_t ny = hi.ny, nx = hi.nx, K = hi.nz;
  const bool pressure = hi.vertical_kind == VerticalKind::pressure;
  const char* vunit = pressure ? "dbar" : "m";
  std::vector<double> lv(K);  // sorted levels (m or dbar)
  for (std::size_t k = 0; k < K; ++k) lv[k] = hi.levels[hi.order[k]];
  const std::vector<double> out_levels = job.levels.empty() ? hi.levels : job.levels;
  const std::size_t M = out_levels.size();
  for (double x : out_levels)
    if (x > lv.back() + 1e-9)
      throw UsageError("--levels: " + number_text(x) + " " + vunit + " is deeper than the deepest level of " +
                       hi.path + " (" + number_text(lv.back()) + " " + vunit + ")");
  if (!surface_ref && job.reference.level > lv.back() + 1e-9)
    throw UsageError("--reference: no-motion level " + number_text(job.reference.level) + " " + vunit +
                     " is deeper than the deepest level of " + hi.path + " (" + number_text(lv.back()) +
                     " " + vunit + ")");

  // ---- section: geodesic samples, walking direction and midpoints of segments ----
  std::optional<SectionSampler> sampler;
  std::vector<std::size_t> sec_slot, full_slot;
  std::vector<double> sec_az, sec_mid_lat, sec_mid_lon, sec_dist;
  std::size_t nseg = 0;
  if (job.section) {
    if (!job.levels.empty())
      throw UsageError("--section integrates over the input's own levels: do not combine it with --levels");
    SectionOptions so;
    so.spacing_m = job.section_spacing_m;
    so.equator_band_deg = job.options.equator_band_deg;
    so.earth = job.options.earth;
    so.gravity = job.options.gravity;
    so.gravity_value = job.options.gravity_value;
    try {
      sampler.emplace(grid, *job.section, so);
    } catch (const std::invalid_argument& e) {
      throw InputError(input_message(hi.path, hvar, e.what()));
    }
    const SectionPath& path = sampler->path();
    nseg = path.seg_length_m.size();
    geod_geodesic gd{};
    if (job.options.earth == EarthModel::sphere) geod_init(&gd, earth::mean_radius, 0.0);
    else geod_init(&gd, earth::wgs84_a, earth::wgs84_f);
    for (std::size_t q = 0; q < nseg; ++q) {
      double s12 = 0, a1 = 0, a2 = 0, mlat = 0, mlon = 0;
      // Karney (2013) via PROJ: azimuths at both ends of the segment's geodesic, their
      // vector mean as the walking direction, and the point half way along it.
      geod_inverse(&gd, path.lat_deg[q], path.lon_deg[q], path.lat_deg[q + 1], path.lon_deg[q + 1], &s12,
                   &a1, &a2);
      double s1 = 0, c1 = 0, s2 = 0, c2 = 0;
      sincosd(a1, s1, c1);
      sincosd(a2, s2, c2);
      sec_az.push_back(std::atan2(s1 + s2, c1 + c2) * 180.0 / 3.14159265358979323846);
      geod_direct(&gd, path.lat_deg[q], path.lon_deg[q], a1, 0.5 * s12, &mlat, &mlon, nullptr);
      sec_mid_lat.push_back(mlat);
      sec_mid_lon.push_back(std::remainder(mlon, 360.0));
      sec_dist.push_back(path.s_m[q] + 0.5 * path.seg_length_m[q]);
    }
    sec_slot.assign(ny, std::numeric_limits<std::size_t>::max());
    for (std::size_t r = 0; r < sampler->rows().size(); ++r) sec_slot[sampler->rows()[r]] = r;
    full_slot.resize(ny);
    for (std::size_t j = 0; j < ny; ++j) full_slot[j] = j;
  }

  // Per-row heights (m) and pressures (dbar) of the input levels, heights of
  // the output levels and of the no-motion level; standard-ocean density.
  std::vector<double> zin(K * ny), pin(K * ny), rho_std(K * ny), zout(M * ny), zref(ny, 0.0);
  for (std::size_t j = 0; j < ny; ++j) {
    const double lat = grid.lat_deg()[j];
    for (std::size_t k = 0; k < K; ++k) {
      if (pressure) {
        pin[k * ny + j] = lv[k];
        zin[k * ny + j] = teos10::z_from_p(lv[k], lat);  // [3] gsw_z_from_p
      } else {
        zin[k * ny + j] = -lv[k];
        pin[k * ny + j] = teos10::p_from_z(-lv[k], lat);  // [3] gsw_p_from_z
      }
      rho_std[k * ny + j] = 1.0 / teos10::specvol_sso_0(pin[k * ny + j]);  // rho(SSO, 0, p)
    }
    for (std::size_t m = 0; m < M; ++m)
      zout[m * ny + j] = pressure ? teos10::z_from_p(out_levels[m], lat) : -out_levels[m];
    if (!surface_ref)
      zref[j] = pressure ? teos10::z_from_p(job.reference.level, lat) : -job.reference.level;
  }

  // ---- heights (surface reference) ----
  std::optional<Reader> ssh;
  std::optional<Grid> sgrid;
  std::optional<GeostrophicKernel> skernel;
  std::optional<GridTransfer> transfer;
  CurrentsOptions co;
  co.order = job.options.order;
  co.equator = EquatorMethod::mask;
  co.equator_band_deg = job.options.equator_band_deg;
  co.coast = job.options.coast;
  co.earth = job.options.earth;
  co.gravity = job.options.gravity;
  co.gravity_value = job.options.gravity_value;
  if (!job.heights.empty()) {
    ssh.emplace(job.heights, job.height_reader);
    const HeightInfo& si = ssh->info();
    if (surface_ref && si.kind == HeightKind::anomaly)
      throw InputError(input_message(
          si.path, si.variable,
          "is a sea level anomaly (" + si.kind_reason +
              "); it lacks the mean circulation, so it cannot anchor the full thermal-wind "
              "profile: give absolute dynamic topography (sea_surface_height_above_geoid) or use "
              "--reference no-motion:LEVEL"));
    sgrid.emplace(make_grid(si.path, si.variable, si.lat, si.lon));
    skernel.emplace(*sgrid, co);
    transfer.emplace(*sgrid, grid);
    bool overlap = false;
    {
      Field probe(sgrid->ny(), sgrid->nx(), 0.0), dst;
      std::vector<std::uint8_t> pf(probe.data.size(), 0), df;
      transfer->apply(probe, pf, dst, df);
      for (double x : dst.data) overlap = overlap || !std::isnan(x);
    }
    if (!overlap)
      throw InputError(input_message(si.path, si.variable,
                                     "its grid does not overlap the hydrography grid of " + hi.path));
  }

  // ---- time steps ----
  const std::size_t ns = ssh ? ssh->info().nt : 0, nh = hi.nt;
  std::size_t nt = nh;
  bool time_from_ssh = false;
  if (ssh) {
    if (nh == 1) {
      nt = ns;
      time_from_ssh = ssh->info().time.has_value() || !hi.time;
    } else if (ns == 1) {
      nt = nh;
    } else if (ns == nh) {
      nt = ns;
      time_from_ssh = true;
      if (ssh->info().time && hi.time)
        for (std::size_t t = 0; t < nt; ++t) {
          const std::string a = ssh->date(t).iso(), b = hydro.date(t).iso();
          if (a != b)
            throw InputError(input_message(hi.path, hvar,
                                           "time step " + std::to_string(t) + " is " + b + " but " +
                                               ssh->info().path + " has " + a));
        }
    } else {
      throw InputError(input_message(hi.path, hvar,
                                     std::to_string(nh) + " time steps do not match the " +
                                         std::to_string(ns) + " of " + ssh->info().path +
                                         " (one hydrography step for all, or the same steps)"));
    }
  }
  const std::optional<CoordVar>& time_coord = time_from_ssh ? ssh->info().time : hi.time;

  // ---- output file ----
  ProfileWriter out(job.output, job.force);
  out.create();
  const bool with_time = time_coord.has_value();
  int dim_t = -1, dim_z = -1, dim_y = -1, dim_x = -1;
  if (with_time) dim_t = out.define_dimension(time_coord->dim, NC_UNLIMITED);
  dim_z = out.define_dimension(hi.vertical.dim, M);
  dim_y = out.define_dimension(hi.lat.dim, ny);
  dim_x = out.define_dimension(hi.lon.dim, nx);
  const int var_t = with_time ? out.define_coordinate(*time_coord, dim_t, false) : -1;
  CoordVar zc = hi.vertical;
  if (!job.levels.empty()) {
    // Requested levels back into the input's units and sign: raw = (sign * level - offset) / scale.
    zc.values.clear();
    for (double x : job.levels) zc.values.push_back((hi.vertical_sign * x - hi.vertical_offset) / hi.vertical_scale);
  }
  const int var_z = out.define_coordinate(zc, dim_z, !job.levels.empty());
  const int var_y = out.define_coordinate(hi.lat, dim_y, false);
  const int var_x = out.define_coordinate(hi.lon, dim_x, false);
  int dim_s = -1, var_sd = -1, var_slat = -1, var_slon = -1;
  if (sampler) {
    dim_s = out.define_dimension("section_distance", nseg);
    CoordVar sd, sla, slo;
    sd.name = "section_distance";
    sd.nc_type = NC_DOUBLE;
    sd.attrs = {text_attribute("long_name", "distance along the section from its first point to the "
                                            "middle of each segment (geodesic)"),
                text_attribute("units", "m")};
    sla.name = "section_lat";
    sla.nc_type = NC_DOUBLE;
    sla.attrs = {text_attribute("standard_name", "latitude"),
                 text_attribute("long_name", "latitude of the segment midpoint"),
                 text_attribute("units", "degrees_north")};
    slo.name = "section_lon";
    slo.nc_type = NC_DOUBLE;
    slo.attrs = {text_attribute("standard_name", "longitude"),
                 text_attribute("long_name", "longitude of the segment midpoint"),
                 text_attribute("units", "degrees_east")};
    var_sd = out.define_coordinate(sd, dim_s, true);
    var_slat = out.define_coordinate(sla, dim_s, true);
    var_slon = out.define_coordinate(slo, dim_s, true);
  }

  // Band rows and chunks (chunk (1, 1, rows, nx) of ~1 MiB float32, as writer.hpp).
  const ShearKernel shear(grid, job.options);
  const std::size_t h = shear.halo_rows();
  std::size_t chunk_rows = std::clamp<std::size_t>((262144 + nx - 1) / nx, 1, ny);
  std::size_t rows = job.band_rows;
  if (rows == 0) {
    const double per_row = static_cast<double>(nx) * (static_cast<double>(K) * 8.0 * 6.0 +
                                                       static_cast<double>(M) * 8.0 * 5.0 + static_cast<double>(M + K));
    const double fixed = static_cast<double>(nx) * static_cast<double>(2 * h) * static_cast<double>(K) * 8.0 * 3.0 +
                         static_cast<double>(ny * nx) * 8.0 * 6.0;
    const double r = (static_cast<double>(job.memory_bytes) - fixed) / per_row;
    rows = r < 1.0 ? 1 : static_cast<std::size_t>(r);
  }
  rows = std::min(rows, ny);
  if (rows >= chunk_rows) rows = rows / chunk_rows * chunk_rows;
  else chunk_rows = rows;

  // Variables.
  const auto txt = [](const char* n, const std::string& v) { return text_attribute(n, v); };
  const std::string ref_txt = reference_text(job.reference, hi.vertical_kind);
  std::vector<OutVar> vars;
  vars.push_back({"u", false, true,
                  {txt("standard_name", "geostrophic_eastward_sea_water_velocity"),
                   txt("long_name", "eastward geostrophic velocity (thermal wind, reference: " + ref_txt + ")"),
                   txt("units", "m s-1"), txt("coverage_content_type", "modelResult"),
                   txt("ancillary_variables", "quality")}});
  vars.push_back({"v", false, true,
                  {txt("standard_name", "geostrophic_northward_sea_water_velocity"),
                   txt("long_name", "northward geostrophic velocity (thermal wind, reference: " + ref_txt + ")"),
                   txt("units", "m s-1"), txt("coverage_content_type", "modelResult"),
                   txt("ancillary_variables", "quality")}});
  if (want_density)
    vars.push_back({"density", false, true,
                    {txt("standard_name", "sea_water_density"),
                     txt("long_name", "in-situ density (TEOS-10, 75-term polynomial of Roquet et al. 2015)"),
                     txt("units", "kg m-3"), txt("coverage_content_type", "modelResult")}});
  if (want_du)
    vars.push_back({"du_dz", false, true,
                    {txt("long_name", "vertical shear du/dz of the eastward geostrophic velocity (thermal wind, z up)"),
                     txt("units", "s-1"), txt("coverage_content_type", "modelResult")}});
  if (want_dv)
    vars.push_back({"dv_dz", false, true,
                    {txt("long_name", "vertical shear dv/dz of the northward geostrophic velocity (thermal wind, z up)"),
                     txt("units", "s-1"), txt("coverage_content_type", "modelResult")}});
  {
    OutVar q{"quality", true, true, {}};
    q.attrs.push_back(txt("standard_name", "quality_flag"));
    q.attrs.push_back(txt("long_name", "thermal-wind velocity quality flags"));
    q.attrs.push_back(number_attribute("flag_masks", NC_UBYTE, {1, 8, 16, 32, 64, 128}));
    q.attrs.push_back(txt("flag_meanings", profile_quality::meanings));
    q.attrs.push_back(txt("comment",
                          "Bit field; 0 = full centred stencils everywhere on the integration path. "
                          "one_sided_difference: a shortened or one-sided horizontal difference (density, "
                          "or the height for the surface reference) entered the value; every other bit "
                          "marks a cell written as _FillValue in u and v."));
    q.attrs.push_back(txt("coverage_content_type", "qualityInformation"));
    vars.push_back(std::move(q));
  }
  const std::size_t first_2d = vars.size();
  if (ssh) {
    vars.push_back({"u_surface", false, false,
                    {txt("standard_name", "surface_geostrophic_eastward_sea_water_velocity"),
                     txt("long_name", "eastward geostrophic surface velocity from " + ssh->info().variable +
                                          " on the hydrography grid (the surface reference)"),
                     txt("units", "m s-1"), txt("coverage_content_type", "modelResult")}});
    vars.push_back({"v_surface", false, false,
                    {txt("standard_name", "surface_geostrophic_northward_sea_water_velocity"),
                     txt("long_name", "northward geostrophic surface velocity from " + ssh->info().variable +
                                          " on the hydrography grid (the surface reference)"),
                     txt("units", "m s-1"), txt("coverage_content_type", "modelResult")}});
  }
  const std::size_t first_section = vars.size();
  if (sampler) {
    const std::string sec = "section '" + job.section->name + "'";
    OutVar vn{"section_normal_velocity", false, false,
              {txt("long_name", "geostrophic velocity normal to " + sec +
                                    ", positive to the left when walking from its first point to its last"),
               txt("units", "m s-1"), txt("coordinates", "section_lat section_lon"),
               txt("coverage_content_type", "modelResult")}};
    OutVar tpd{"section_transport_per_depth", false, false,
               {txt("long_name", "transport per unit depth across " + sec + ": sum of v_n ds over usable segments"),
                txt("units", "m2 s-1"), txt("coverage_content_type", "modelResult")}};
    tpd.as_double = true;
    OutVar tr{"section_transport", false, false,
              {txt("standard_name", "ocean_volume_transport_across_line"),
               txt("long_name", "full-depth geostrophic volume transport across " + sec +
                                    " (positive to the left; 1 Sv = 1e6 m3 s-1)"),
               txt("units", "m3 s-1"), txt("coverage_content_type", "modelResult")}};
    tr.as_double = true;
    vars.push_back(std::move(vn));
    vars.push_back(std::move(tpd));
    vars.push_back(std::move(tr));
  }
  {
    const int d4[4] = {dim_t, dim_z, dim_y, dim_x};
    const int d3[3] = {dim_t, dim_y, dim_x};
    const std::size_t c4[4] = {1, 1, chunk_rows, nx};
    const std::size_t c3[3] = {1, chunk_rows, nx};
    for (std::size_t k = 0; k < first_section; ++k) {
      OutVar& v = vars[k];
      if (v.four_d) out.define(v, with_time ? d4 : d4 + 1, with_time ? 4 : 3, with_time ? c4 : c4 + 1, job.deflate);
      else out.define(v, with_time ? d3 : d3 + 1, with_time ? 3 : 2, with_time ? c3 : c3 + 1, job.deflate);
    }
    if (sampler) {
      const int ds3[3] = {dim_t, dim_z, dim_s}, ds2[2] = {dim_t, dim_z}, ds1[1] = {dim_t};
      const std::size_t cs3[3] = {1, 1, nseg}, cs2[2] = {1, M}, cs1[1] = {1};
      out.define(vars[first_section], with_time ? ds3 : ds3 + 1, with_time ? 3 : 2, with_time ? cs3 : cs3 + 1,
                 job.deflate);
      out.define(vars[first_section + 1], with_time ? ds2 : ds2 + 1, with_time ? 2 : 1,
                 with_time ? cs2 : cs2 + 1, 0);
      if (with_time) out.define(vars[first_section + 2], ds1, 1, cs1, 0);
      else out.define(vars[first_section + 2], nullptr, 0, nullptr, 0);
    }
  }

  // Global attributes.
  {
    std::vector<Attribute> g;
    const std::string created = now_iso();
    g.push_back(txt("Conventions", "CF-1.12, ACDD-1.3"));
    g.push_back(txt("title", "Geostrophic currents at depth (thermal wind) from " + hi.path));
    g.push_back(txt("summary",
                    "Eastward and northward geostrophic velocity on the levels of the hydrography, "
                    "from the thermal-wind shear of the TEOS-10 density field integrated from the " +
                        ref_txt + "."));
    g.push_back(txt("keywords", "geostrophic currents, thermal wind, hydrography, TEOS-10, sea surface height"));
    g.push_back(txt("comment", std::string(profile_caution()) + currents_caution()));
    std::string history = created + " " + job.command_line;
    const std::string old = attr_text(hi.global_attrs, "history");
    if (!old.empty()) history += "\n" + old;
    g.push_back(txt("history", history));
    g.push_back(txt("source", std::string("seatilt ") + SEATILT_VERSION + " from " + hi.path +
                                  (ssh ? " and " + ssh->info().path : std::string())));
    g.push_back(txt("processing_level", "L4 derived product"));
    g.push_back(txt("standard_name_vocabulary", "CF Standard Name Table v83"));
    g.push_back(txt("date_created", created));
    const auto [la0, la1] = std::minmax_element(hi.lat.values.begin(), hi.lat.values.end());
    const auto [lo0, lo1] = std::minmax_element(hi.lon.values.begin(), hi.lon.values.end());
    g.push_back(number_attribute("geospatial_lat_min", NC_DOUBLE, {*la0}));
    g.push_back(number_attribute("geospatial_lat_max", NC_DOUBLE, {*la1}));
    g.push_back(txt("geospatial_lat_units", "degrees_north"));
    g.push_back(number_attribute("geospatial_lon_min", NC_DOUBLE, {*lo0}));
    g.push_back(number_attribute("geospatial_lon_max", NC_DOUBLE, {*lo1}));
    g.push_back(txt("geospatial_lon_units", "degrees_east"));
    const auto [z0, z1] = std::minmax_element(out_levels.begin(), out_levels.end());
    g.push_back(number_attribute("geospatial_vertical_min", NC_DOUBLE, {*z0}));
    g.push_back(number_attribute("geospatial_vertical_max", NC_DOUBLE, {*z1}));
    g.push_back(txt("geospatial_vertical_units", vunit));
    g.push_back(txt("geospatial_vertical_positive", "down"));
    g.push_back(txt("references",
                    "Roquet et al. (2015) Ocean Modelling 90, 29-43 (75-term TEOS-10 density); IOC, SCOR "
                    "and IAPSO (2010) TEOS-10 manual; McDougall and Barker (2011) GSW toolbox"));
    g.push_back(txt("thermal_wind_reference", ref_txt));
    g.push_back(txt("thermal_wind_form",
                    "Boussinesq: du/dz = (g/(rho0 f)) drho/dy, dv/dz = -(g/(rho0 f)) drho/dx, gradients "
                    "along the input levels of rho(SA,CT,p) - rho(SSO,0,p); trapezoidal integration"));
    g.push_back(number_attribute("thermal_wind_rho0", NC_DOUBLE, {job.options.rho0}));
    g.push_back(number_attribute("geostrophy_stencil_order", NC_INT, {static_cast<double>(job.options.order)}));
    g.push_back(number_attribute("geostrophy_equator_band_deg", NC_DOUBLE, {job.options.equator_band_deg}));
    g.push_back(txt("geostrophy_equator_method", "mask"));
    g.push_back(txt("geostrophy_coast_method", to_string(job.options.coast)));
    g.push_back(txt("geostrophy_earth_model", to_string(job.options.earth)));
    g.push_back(txt("geostrophy_gravity", gravity_description(co)));
    g.push_back(txt("input_hydrography", hi.path));
    g.push_back(txt("input_vertical_coordinate", hi.vertical.name + ": " + hi.vertical_reason));
    if (hi.from_density) {
      g.push_back(txt("input_density_variable", hi.density + " (" + hi.density_reason + ")"));
    } else {
      g.push_back(txt("input_temperature_variable", hi.temperature + " (" + hi.temperature_reason + ")"));
      g.push_back(txt("input_salinity_variable", hi.salinity + " (" + hi.salinity_reason + ")"));
    }
    if (ssh) {
      g.push_back(txt("input_height_variable", ssh->info().variable));
      g.push_back(txt("input_height_kind", ssh->info().kind == HeightKind::anomaly ? "anomaly" : "absolute"));
      g.push_back(txt("input_height_grid", transfer->identity() ? "same as the hydrography grid"
                                                                : "interpolated bilinearly to the hydrography grid"));
    }
    if (sampler) {
      std::string line;
      for (const GeoPoint& pt : job.section->points)
        line += (line.empty() ? "" : ", ") + number_text(pt.lon_deg) + " " + number_text(pt.lat_deg);
      g.push_back(txt("section_name", job.section->name));
      g.push_back(txt("section_line", line));
      g.push_back(number_attribute("section_length_m", NC_DOUBLE, {sampler->path().length_m}));
      g.push_back(number_attribute("section_spacing_m", NC_DOUBLE, {sampler->spacing_m()}));
      g.push_back(txt("section_method",
                      "v_n = -u cos(az) + v sin(az) from the mean of two bilinear samples (land-aware), "
                      "positive to the left of the walking direction; transport = sum over segments of "
                      "ds times the trapezoidal integral of v_n from the surface to the segment's deepest "
                      "usable level (no flow assumed below it)"));
    }
    for (const auto& a : g) out.put_attribute(NC_GLOBAL, "", a);
  }
  out.end_define();
  if (with_time) out.put_coordinate(var_t, time_coord->name, time_coord->values);
  out.put_coordinate(var_z, zc.name, zc.values);
  out.put_coordinate(var_y, hi.lat.name, hi.lat.values);
  out.put_coordinate(var_x, hi.lon.name, hi.lon.values);
  if (sampler) {
    out.put_coordinate(var_sd, "section_distance", sec_dist);
    out.put_coordinate(var_slat, "section_lat", sec_mid_lat);
    out.put_coordinate(var_slon, "section_lon", sec_mid_lon);
  }

  // ---- per-row brackets of the output and no-motion levels ----
  std::vector<Bracket> bout(M * ny), bref(ny);
  for (std::size_t j = 0; j < ny; ++j) {
    std::vector<double> zc_row(K);
    for (std::size_t k = 0; k < K; ++k) zc_row[k] = zin[k * ny + j];
    for (std::size_t m = 0; m < M; ++m) bout[m * ny + j] = find_bracket(zc_row.data(), K, zout[m * ny + j]);
    bref[j] = find_bracket(zc_row.data(), K, zref[j]);
  }

  // ---- the loop: steps, then bands of rows ----
  ProfileSummary sum;
  sum.band_rows = rows;
  sum.levels = M;
  Field us, vs;  // surface reference on the hydrography grid
  std::vector<std::uint8_t> us_flags;
  std::vector<Field> a_lv, b_lv, rho_lv;  // per input level: temperature/density, salinity, in-situ rho
  std::vector<Field> du(K), dv(K);
  std::vector<std::vector<std::uint8_t>> lflags(K);
  std::vector<double> ou, ov, od, odu, odv;   // per band outputs, [m][row][col]
  std::vector<std::uint8_t> oq;
  std::vector<Field> sec_u(sampler ? M : 0), sec_v(sampler ? M : 0);  // section rows, per output level
  for (std::size_t t = 0; t < nt; ++t) {
    const std::size_t th = nh == 1 ? 0 : t;
    for (std::size_t m = 0; m < sec_u.size(); ++m) {
      sec_u[m] = Field(sampler->rows().size(), nx, nan);
      sec_v[m] = Field(sampler->rows().size(), nx, nan);
    }
    if (ssh) {
      const std::size_t ts = ns == 1 ? 0 : t;
      Field eta, u2, v2;
      std::vector<std::uint8_t> f2;
      ssh->read_rows(ts, 0, sgrid->ny(), eta);
      skernel->compute(eta, 0, 0, sgrid->ny(), u2, v2, f2);
      std::vector<std::uint8_t> fu;
      transfer->apply(u2, f2, us, us_flags);
      transfer->apply(v2, f2, vs, fu);
      for (std::size_t c = 0; c < fu.size(); ++c) us_flags[c] = static_cast<std::uint8_t>(us_flags[c] | fu[c]);
      const std::size_t s3[3] = {t, 0, 0}, n3[3] = {1, ny, nx};
      out.put_floats(vars[first_2d], with_time ? s3 : s3 + 1, with_time ? n3 : n3 + 1, us.data.data(), ny * nx);
      out.put_floats(vars[first_2d + 1], with_time ? s3 : s3 + 1, with_time ? n3 : n3 + 1, vs.data.data(), ny * nx);
    }
    std::size_t valid_density = 0;
    for (std::size_t j0 = 0; j0 < ny; j0 += rows) {
      const std::size_t n = std::min(rows, ny - j0);
      const std::size_t e0 = j0 >= h ? j0 - h : 0;
      const std::size_t e1 = std::min(ny, j0 + n + h);
      // Density anomaly per level on rows [e0, e1).
      if (hi.from_density) {
        hydro.read_levels(HydroField::density, th, e0, e1 - e0, a_lv);
        rho_lv = a_lv;
      } else {
        hydro.read_levels(HydroField::temperature, th, e0, e1 - e0, a_lv);
        hydro.read_levels(HydroField::salinity, th, e0, e1 - e0, b_lv);
        rho_lv.resize(K);
        for (std::size_t k = 0; k < K; ++k) {
          rho_lv[k] = Field(e1 - e0, nx, nan);
          const auto rows_e = static_cast<long>(e1 - e0);
#pragma omp parallel for schedule(static)
          for (long r = 0; r < rows_e; ++r) {
            const auto q = static_cast<std::size_t>(r);
            const double p = pin[k * ny + e0 + q];
            for (std::size_t i = 0; i < nx; ++i)
              rho_lv[k].at(q, i) = in_situ_density(a_lv[k].at(q, i), b_lv[k].at(q, i), hi.temperature_kind,
                                                   hi.salinity_kind, p);
          }
        }
      }
      for (std::size_t k = 0; k < K; ++k) {
        Field anomaly = rho_lv[k];
        for (std::size_t q = 0; q < anomaly.ny; ++q)
          for (std::size_t i = 0; i < nx; ++i) anomaly.at(q, i) -= rho_std[k * ny + e0 + q];
        shear.compute(anomaly, e0, j0, n, du[k], dv[k], lflags[k]);
      }
      for (std::size_t q = j0 - e0; q < j0 - e0 + n; ++q)
        for (std::size_t i = 0; i < nx; ++i) valid_density += !std::isnan(rho_lv[0].at(q, i));

      // Columns.
      const std::size_t cells = n * nx;
      ou.assign(M * cells, nan);
      ov.assign(M * cells, nan);
      oq.assign(M * cells, 0);
      if (want_density) od.assign(M * cells, nan);
      if (want_du) odu.assign(M * cells, nan);
      if (want_dv) odv.assign(M * cells, nan);
      const auto nrows = static_cast<long>(n);
#pragma omp parallel for schedule(dynamic, 2)
      for (long r = 0; r < nrows; ++r) {
        const auto q = static_cast<std::size_t>(r);
        const std::size_t j = j0 + q;
        std::vector<double> z(K), su(K), sv(K), Pu(K), Pv(K), rr(K);
        for (std::size_t k = 0; k < K; ++k) z[k] = zin[k * ny + j];
        for (std::size_t i = 0; i < nx; ++i) {
          const std::size_t c = q * nx + i;
          std::size_t kd = K, ku = K;  // levels with density / with usable shear (from the top)
          std::uint8_t row_mask = 0;
          for (std::size_t k = 0; k < K; ++k) {
            const std::uint8_t f = lflags[k][c];
            if (k < ku && (f & profile_quality::masked_any)) ku = k;
            if (f & profile_quality::missing_density) { kd = k; break; }
          }
          ku = std::min(ku, kd);
          if (kd > 0)
            row_mask = static_cast<std::uint8_t>(
                lflags[0][c] & (profile_quality::masked_equator | profile_quality::masked_pole));
          for (std::size_t k = 0; k < kd; ++k) {
            su[k] = du[k].at(q, i);
            sv[k] = dv[k].at(q, i);
            rr[k] = rho_lv[k].at(q + (j0 - e0), i);
          }
          prefix_integrals(z.data(), su.data(), ku, Pu.data());
          prefix_integrals(z.data(), sv.data(), ku, Pv.data());
          // Reference constants c: u = c + I(z).
          double cu = nan, cv = nan;
          std::uint8_t ref_flag = 0;
          std::size_t ref_lo = 0;  // deepest level the reference depends on (no-motion)
          if (surface_ref) {
            cu = us.at(j, i);
            cv = vs.at(j, i);
            ref_flag = static_cast<std::uint8_t>(us_flags[j * nx + i] & quality::one_sided);
          } else if (reaches(bref[j], ku)) {
            cu = -integral_at(z.data(), su.data(), Pu.data(), bref[j], zref[j]);
            cv = -integral_at(z.data(), sv.data(), Pv.data(), bref[j], zref[j]);
            ref_lo = deepest(bref[j]);
          }
          const bool ref_ok = !std::isnan(cu) && !std::isnan(cv);
          for (std::size_t m = 0; m < M; ++m) {
            const Bracket& b = bout[m * ny + j];
            const std::size_t o = m * cells + c;
            const bool dens_ok = reaches(b, kd);
            if (dens_ok && want_density) od[o] = value_at(rr.data(), b);
            if (row_mask) { oq[o] = row_mask; continue; }
            if (!dens_ok) { oq[o] = profile_quality::missing_density; continue; }
            if (!reaches(b, ku)) { oq[o] = profile_quality::no_gradient; continue; }
            if (want_du) odu[o] = value_at(su.data(), b);
            if (want_dv) odv[o] = value_at(sv.data(), b);
            if (!ref_ok) { oq[o] = profile_quality::no_reference; continue; }
            const double zo = zout[m * ny + j];
            ou[o] = cu + integral_at(z.data(), su.data(), Pu.data(), b, zo);
            ov[o] = cv + integral_at(z.data(), sv.data(), Pv.data(), b, zo);
            // one-sided differences on the path between the value and its reference
            std::size_t lo = 0, hi_k = deepest(b);
            if (!surface_ref) {
              lo = std::min(b.above ? 0 : b.k, bref[j].above ? 0 : bref[j].k);
              hi_k = std::max(hi_k, ref_lo);
            }
            std::uint8_t f = ref_flag;
            for (std::size_t k = lo; k <= hi_k && k < ku; ++k)
              f = static_cast<std::uint8_t>(f | (lflags[k][c] & profile_quality::one_sided));
            oq[o] = f;
          }
        }
      }
      // Write the band, level by level (whole chunks when rows align).
      for (std::size_t m = 0; m < M; ++m) {
        const std::size_t s4[4] = {t, m, j0, 0}, n4[4] = {1, 1, n, nx};
        const std::size_t* st = with_time ? s4 : s4 + 1;
        const std::size_t* ct = with_time ? n4 : n4 + 1;
        std::size_t vi = 0;
        out.put_floats(vars[vi++], st, ct, ou.data() + m * cells, cells);
        out.put_floats(vars[vi++], st, ct, ov.data() + m * cells, cells);
        if (want_density) out.put_floats(vars[vi++], st, ct, od.data() + m * cells, cells);
        if (want_du) out.put_floats(vars[vi++], st, ct, odu.data() + m * cells, cells);
        if (want_dv) out.put_floats(vars[vi++], st, ct, odv.data() + m * cells, cells);
        out.put_flags(vars[vi], st, ct, oq.data() + m * cells);
      }
      for (std::uint8_t f : oq) sum.valid += (f & profile_quality::masked_any) == 0;
      if (sampler)
        for (std::size_t q = 0; q < n; ++q) {
          const std::size_t r = sec_slot[j0 + q];
          if (r == std::numeric_limits<std::size_t>::max()) continue;
          for (std::size_t m = 0; m < M; ++m) {
            std::copy_n(ou.data() + m * cells + q * nx, nx, sec_u[m].row(r));
            std::copy_n(ov.data() + m * cells + q * nx, nx, sec_v[m].row(r));
          }
        }
    }
    if (sampler) {
      // Levels in increasing depth (output level = file level here: --levels is refused).
      const std::size_t nsamp = nseg + 1;
      std::vector<double> su(K * nsamp), sv(K * nsamp), sz(K * nseg), top_u, top_v;
      for (std::size_t k = 0; k < K; ++k) {
        const std::size_t m = hi.order[k];
        const std::vector<double> a = sampler->sample_heights(sec_u[m], sec_slot);
        const std::vector<double> b = sampler->sample_heights(sec_v[m], sec_slot);
        std::copy(a.begin(), a.end(), su.begin() + static_cast<std::ptrdiff_t>(k * nsamp));
        std::copy(b.begin(), b.end(), sv.begin() + static_cast<std::ptrdiff_t>(k * nsamp));
        for (std::size_t q = 0; q < nseg; ++q)
          sz[k * nseg + q] = pressure ? teos10::z_from_p(lv[k], sampler->path().mid_lat_deg[q]) : -lv[k];
      }
      if (ssh) {
        top_u = sampler->sample_heights(us, full_slot);
        top_v = sampler->sample_heights(vs, full_slot);
      }
      const SectionProfile sp = section_profile(nseg, K, sampler->path().seg_length_m, sec_az, su, sv, sz,
                                                top_u, top_v);
      const OutVar& vn = vars[first_section];
      for (std::size_t k = 0; k < K; ++k) {
        const std::size_t m = hi.order[k];
        const std::size_t s3[3] = {t, m, 0}, n3[3] = {1, 1, nseg};
        out.put_floats(vn, with_time ? s3 : s3 + 1, with_time ? n3 : n3 + 1, sp.normal_velocity.data() + k * nseg,
                       nseg);
      }
      std::vector<double> tpd(M);
      for (std::size_t k = 0; k < K; ++k) tpd[hi.order[k]] = sp.transport_per_depth[k];
      const std::size_t s2[2] = {t, 0}, n2[2] = {1, M};
      out.put_doubles(vars[first_section + 1], with_time ? s2 : s2 + 1, with_time ? n2 : n2 + 1, tpd.data(), M);
      const std::size_t s1[1] = {t}, n1[1] = {1};
      out.put_doubles(vars[first_section + 2], with_time ? s1 : nullptr, with_time ? n1 : nullptr, &sp.transport, 1);
      sum.section_transport.push_back(sp.transport);
    }
    if (valid_density == 0)
      throw InputError(input_message(hi.path, hvar,
                                     "every cell of the top level is missing at time step " + std::to_string(th)));
    sum.steps += 1;
    sum.cells += M * ny * nx;
  }
  out.set_global_text("seatilt_status", "complete");
  out.commit();
  return sum;
}

}  // namespace seatilt
