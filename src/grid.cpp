// Notation: lat/phi latitude, lon/lambda longitude; _deg degrees, _rad radians.
// M meridional and N prime-vertical radius of curvature (m); e2 first
// eccentricity squared; Omega earth rotation rate (rad s-1).
#include "seatilt/grid.hpp"

#include <proj.h>

#include <algorithm>
#include <cctype>
#include <cmath>
#include <cstdio>
#include <limits>
#include <numeric>
#include <optional>
#include <sstream>
#include <stdexcept>
#include <string>

#include "stencil.hpp"

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

// ---- projected and curvilinear grids (grid.hpp "Method") ------------------------------
//
// Notation: a semi-major axis (m), e2 first eccentricity squared; X, Y
// projected coordinates (m); c, r column and row coordinates; P node position
// (ECEF, m); e_hat, n_hat local east and north unit vectors; B the
// DirectionalMetric. PROJ's derivatives dx_dlam, ... are per radian on a unit
// semi-major axis [6] (REFERENCES.md §7).

namespace seatilt {

namespace {

constexpr double nan_value = std::numeric_limits<double>::quiet_NaN();

/// Colatitude (rad) below which a projected node counts as a pole: PROJ's
/// proj_factors moves points within its difference step (1e-5 rad) of a pole
/// away from it, so its derivatives there are not those of the node [6].
constexpr double pole_colatitude_rad = 2e-5;

std::string fmt_number(double v) {
  char buf[40];
  std::snprintf(buf, sizeof buf, "%.17g", v);
  return buf;
}

std::string short_number(double v) {
  char buf[40];
  std::snprintf(buf, sizeof buf, "%.12g", v);
  return buf;
}

void silence(PJ_CONTEXT* ctx) {
  // Library code never prints: PROJ's default logger writes to stderr.
  proj_log_level(ctx, PJ_LOG_NONE);
  proj_log_func(ctx, nullptr, [](void*, int, const char*) {});
}

std::string proj_error(PJ_CONTEXT* ctx) {
  const int e = proj_context_errno(ctx);
  const char* s = e != 0 ? proj_context_errno_string(ctx, e) : nullptr;
  return s != nullptr ? s : "unknown PROJ error";
}

/// A PROJ context with one object; destroyed together.
struct PjHandle {
  PJ_CONTEXT* ctx = nullptr;
  PJ* pj = nullptr;
  PjHandle() : ctx(proj_context_create()) {
    if (ctx == nullptr) throw std::runtime_error("PROJ: cannot create a context");
    silence(ctx);
  }
  explicit PjHandle(const std::string& definition) : PjHandle() {
    pj = proj_create(ctx, definition.c_str());
    if (pj == nullptr) {
      const std::string why = proj_error(ctx);
      proj_context_destroy(ctx);
      throw std::invalid_argument("PROJ refuses the projection \"" + definition + "\": " + why);
    }
  }
  ~PjHandle() {
    if (pj != nullptr) proj_destroy(pj);
    if (ctx != nullptr) proj_context_destroy(ctx);
  }
  PjHandle(const PjHandle&) = delete;
  PjHandle& operator=(const PjHandle&) = delete;
};

std::string lower_trim(std::string s) {
  const auto b = s.find_first_not_of(" \t\r\n");
  const auto e = s.find_last_not_of(" \t\r\n");
  s = b == std::string::npos ? std::string() : s.substr(b, e - b + 1);
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

/// Reads and checks the numeric parameters of a grid mapping, recording those used.
class CfParameters {
public:
  CfParameters(const GridMapping& m, std::string name) : m_(m), name_(std::move(name)) {}

  /// All values of NAME, or nullopt; throws for text or non-finite values.
  std::optional<std::vector<double>> values(const std::string& name) const {
    if (m_.texts.count(name) != 0U)
      throw std::invalid_argument("grid mapping attribute " + name + " is text, not a number");
    auto it = m_.numbers.find(name);
    if (it == m_.numbers.end()) return std::nullopt;
    if (it->second.empty())
      throw std::invalid_argument("grid mapping attribute " + name + " is empty");
    for (double v : it->second)
      if (!std::isfinite(v))
        throw std::invalid_argument("grid mapping attribute " + name + " is not finite");
    return it->second;
  }
  /// The single value of NAME, or nullopt.
  std::optional<double> optional(const std::string& name) {
    auto v = values(name);
    if (!v) return std::nullopt;
    if (v->size() != 1)
      throw std::invalid_argument("grid mapping attribute " + name + " must have one value (has " +
                                  std::to_string(v->size()) + ")");
    used_.emplace_back(name, short_number(v->front()));
    return v->front();
  }
  double required(const std::string& name) {
    auto v = optional(name);
    if (!v)
      throw std::invalid_argument("grid mapping attribute " + name + " is missing (needed by " +
                                  name_ + ")");
    return *v;
  }
  static double latitude(const std::string& name, double v) {
    if (v < -90.0 || v > 90.0)
      throw std::invalid_argument("grid mapping attribute " + name + " = " + short_number(v) +
                                  " is outside -90..90 degrees");
    return v;
  }
  static double longitude(const std::string& name, double v) {
    if (v < -360.0 || v > 360.0)
      throw std::invalid_argument("grid mapping attribute " + name + " = " + short_number(v) +
                                  " is outside -360..360 degrees");
    return v;
  }
  static double scale(const std::string& name, double v) {
    if (!(v > 0.0 && v <= 10.0))
      throw std::invalid_argument("grid mapping attribute " + name + " = " + short_number(v) +
                                  " is outside 0..10 (a scale factor must be > 0)");
    return v;
  }
  const std::vector<std::pair<std::string, std::string>>& used() const { return used_; }
  void note(const std::string& name, const std::string& value) { used_.emplace_back(name, value); }

private:
  const GridMapping& m_;
  std::string name_;
  std::vector<std::pair<std::string, std::string>> used_;
};

/// The ellipsoid given by the CF attributes [5] Table F.1, or nullopt when
/// none is given. Records the attributes used in P.
std::optional<Ellipsoid> cf_ellipsoid(const GridMapping& m, CfParameters& p, std::string& tokens) {
  const auto radius = p.optional("earth_radius");
  const auto a = p.optional("semi_major_axis");
  const auto b = p.optional("semi_minor_axis");
  const auto rf = p.optional("inverse_flattening");
  const auto check_a = [](const char* what, double v) {
    // Earth-sized figures only: a value in km (6378.137) is a unit mistake.
    if (!(v >= 6.0e6 && v <= 7.0e6))
      throw std::invalid_argument(std::string("grid mapping attribute ") + what + " = " +
                                  short_number(v) + " m is not an earth radius (6000..7000 km)");
  };
  if (radius) {
    check_a("earth_radius", *radius);
    if (a && std::fabs(*a - *radius) > 1e-3)
      throw std::invalid_argument("grid mapping attributes earth_radius (" + short_number(*radius) +
                                  ") and semi_major_axis (" + short_number(*a) + ") disagree");
    if ((b && std::fabs(*b - *radius) > 1e-3) || (rf && *rf != 0.0))
      throw std::invalid_argument(
          "grid mapping attribute earth_radius (a sphere) conflicts with semi_minor_axis or "
          "inverse_flattening");
    tokens = " +R=" + fmt_number(*radius);
    return Ellipsoid{*radius, 0.0};
  }
  if (a) {
    check_a("semi_major_axis", *a);
    double f = 0.0;
    if (rf) {
      if (*rf < 0.0 || (*rf > 0.0 && *rf < 100.0))
        throw std::invalid_argument("grid mapping attribute inverse_flattening = " +
                                    short_number(*rf) + " is not 0 (sphere) or >= 100");
      f = *rf == 0.0 ? 0.0 : 1.0 / *rf;
      tokens = *rf == 0.0 ? " +R=" + fmt_number(*a)
                          : " +a=" + fmt_number(*a) + " +rf=" + fmt_number(*rf);
      // CF Table F.1: with all three given, b = a (1 - 1/rf) must hold.
      if (b && std::fabs(*b - *a * (1.0 - f)) > 1e-3)
        throw std::invalid_argument(
            "grid mapping attributes semi_minor_axis (" + short_number(*b) +
            " m) and inverse_flattening (" + short_number(*rf) +
            ") disagree (b = a (1 - 1/rf) = " + short_number(*a * (1.0 - f)) + " m)");
    } else if (b) {
      if (!(*b > 0.9 * *a && *b <= *a))
        throw std::invalid_argument("grid mapping attribute semi_minor_axis = " + short_number(*b) +
                                    " m is not between 0.9 a and a");
      f = (*a - *b) / *a;
      tokens = " +a=" + fmt_number(*a) + " +b=" + fmt_number(*b);
    } else {
      tokens = " +R=" + fmt_number(*a);
    }
    return Ellipsoid{*a, f * (2.0 - f)};
  }
  if (b || rf)
    throw std::invalid_argument(
        "grid mapping gives semi_minor_axis or inverse_flattening without semi_major_axis");
  auto it = m.texts.find("reference_ellipsoid_name");
  if (it != m.texts.end()) {
    std::string n;
    for (char c : lower_trim(it->second))
      if (std::isalnum(static_cast<unsigned char>(c))) n += c;
    if (n == "wgs84" || n == "wgs1984") {
      p.note("reference_ellipsoid_name", it->second);
      tokens = " +ellps=WGS84";
      return Ellipsoid{earth::wgs84_a, earth::wgs84_e2};
    }
    if (n == "grs1980" || n == "grs80") {
      // GRS80: a = 6378137 m, 1/f = 298.257222101 (Moritz 2000, [2])
      p.note("reference_ellipsoid_name", it->second);
      tokens = " +ellps=GRS80";
      const double f = 1.0 / 298.257222101;
      return Ellipsoid{6378137.0, f * (2.0 - f)};
    }
    throw std::invalid_argument("grid mapping attribute reference_ellipsoid_name \"" + it->second +
                                "\" is not known here; give semi_major_axis and "
                                "inverse_flattening");
  }
  return std::nullopt;
}

std::string ellipsoid_tokens(const Ellipsoid& e) {
  if (e.e2 == 0.0) return " +R=" + fmt_number(e.a);
  const double f = 1.0 - std::sqrt(1.0 - e.e2);  // e2 = f (2 - f)
  return " +a=" + fmt_number(e.a) + " +rf=" + fmt_number(1.0 / f);
}

std::string ellipsoid_text(const Ellipsoid& e) {
  if (e.e2 == 0.0) return "sphere, R = " + short_number(e.a) + " m";
  const double f = 1.0 - std::sqrt(1.0 - e.e2);
  char buf[80];
  std::snprintf(buf, sizeof buf, "a = %.10g m, 1/f = %.12g", e.a, 1.0 / f);
  return buf;
}

/// k0 of polar stereographic variant A from the standard parallel of variant
/// B: k0 = m_F sqrt((1+e)^(1+e) (1-e)^(1-e)) / (2 t_F), m_F = cos(phi_F) /
/// sqrt(1 - e2 sin2 phi_F), t_F = tan(pi/4 - phi_F/2) / ((1 - e sin phi_F) /
/// (1 + e sin phi_F))^(e/2), phi_F = |standard parallel| (EPSG Guidance Note
/// 7-2, method 9829; Snyder [7] eqs. 14-15, 15-9, 21-33; from memory, checked
/// against PROJ in test_curvilinear).
double polar_k0(const Ellipsoid& ell, double sp_deg) {
  const double phi = std::fabs(sp_deg) * deg;
  const double e = std::sqrt(ell.e2), s = std::sin(phi);
  const double m = std::cos(phi) / std::sqrt(1.0 - ell.e2 * s * s);
  const double t =
      std::tan(pi / 4.0 - phi / 2.0) / std::pow((1.0 - e * s) / (1.0 + e * s), e / 2.0);
  const double c =
      e > 0.0 ? std::sqrt(std::pow(1.0 + e, 1.0 + e) * std::pow(1.0 - e, 1.0 - e)) : 1.0;
  return m * c / (2.0 * t);
}

struct Definition {
  std::string name, proj;
  Ellipsoid ellipsoid;
  std::string
      figure;  // PROJ tokens of the figure as given (" +a=... +rf=..."), "" = from ellipsoid
  bool ellipsoid_given = false;
  std::vector<std::pair<std::string, std::string>> parameters;
};

/// PROJ definition from the CF attributes (Appendix F -> PROJ operation names).
Definition cf_definition(const GridMapping& m, const std::string& gm_name) {
  CfParameters p(m, gm_name);
  Definition d;
  d.name = gm_name;
  std::string s;
  const auto lat = [&](const char* n) { return CfParameters::latitude(n, p.required(n)); };
  const auto lon = [&](const char* n) { return CfParameters::longitude(n, p.required(n)); };
  const auto add = [&](const char* key, double v) {
    s += std::string(" +") + key + "=" + fmt_number(v);
  };
  const auto standard_parallels = [&](std::size_t max_count) {
    auto v = p.values("standard_parallel");
    if (!v) return std::vector<double>{};
    if (v->size() > max_count)
      throw std::invalid_argument("grid mapping attribute standard_parallel has " +
                                  std::to_string(v->size()) + " values (" + gm_name +
                                  " takes at most " + std::to_string(max_count) + ")");
    std::string text;
    for (double x : *v) {
      CfParameters::latitude("standard_parallel", x);
      text += (text.empty() ? "" : ", ") + short_number(x);
    }
    p.note("standard_parallel", text);
    return *v;
  };

  // Ellipsoid first: polar stereographic needs it to compare k0 with the
  // standard parallel. Its attributes are listed after the projection's.
  CfParameters figure(m, gm_name);
  const auto ell = cf_ellipsoid(m, figure, d.figure);
  d.ellipsoid = ell.value_or(Ellipsoid{});
  d.ellipsoid_given = ell.has_value();
  if (auto pm = figure.optional("longitude_of_prime_meridian"); pm && *pm != 0.0)
    throw std::invalid_argument("grid mapping attribute longitude_of_prime_meridian = " +
                                short_number(*pm) + " (only Greenwich, 0, is supported)");

  if (gm_name == "polar_stereographic") {
    const double lat0 = lat("latitude_of_projection_origin");
    if (std::fabs(std::fabs(lat0) - 90.0) > 1e-9)
      throw std::invalid_argument(
          "grid mapping polar_stereographic needs latitude_of_projection_origin +90 or -90 (has " +
          short_number(lat0) + "; use stereographic for another origin)");
    auto lon0 = p.optional("longitude_of_projection_origin");
    const auto svl = p.optional("straight_vertical_longitude_from_pole");
    if (lon0 && svl && std::fabs(*lon0 - *svl) > 1e-9)
      throw std::invalid_argument(
          "grid mapping attributes longitude_of_projection_origin (" + short_number(*lon0) +
          ") and straight_vertical_longitude_from_pole (" + short_number(*svl) + ") disagree");
    if (!lon0) lon0 = svl;
    if (!lon0)
      throw std::invalid_argument(
          "grid mapping attribute longitude_of_projection_origin (or "
          "straight_vertical_longitude_from_pole) is missing (needed by polar_stereographic)");
    CfParameters::longitude("longitude_of_projection_origin", *lon0);
    const auto sp = standard_parallels(1);
    const auto k0 = p.optional("scale_factor_at_projection_origin");
    s = "+proj=stere";
    add("lat_0", lat0 > 0 ? 90.0 : -90.0);
    add("lon_0", *lon0);
    if (!sp.empty()) {
      if (sp[0] * lat0 <= 0.0)
        throw std::invalid_argument(
            "grid mapping polar_stereographic: standard_parallel " + short_number(sp[0]) +
            " is not in the hemisphere of latitude_of_projection_origin " + short_number(lat0));
      if (k0) {
        CfParameters::scale("scale_factor_at_projection_origin", *k0);
        const double implied = polar_k0(d.ellipsoid, sp[0]);
        if (std::fabs(implied - *k0) > 1e-5)
          throw std::invalid_argument(
              "grid mapping polar_stereographic: standard_parallel " + short_number(sp[0]) +
              " and scale_factor_at_projection_origin " + short_number(*k0) +
              " disagree (the standard parallel implies " + short_number(implied) + ")");
      }
      add("lat_ts", sp[0]);
    } else if (k0) {
      add("k_0", CfParameters::scale("scale_factor_at_projection_origin", *k0));
    } else {
      throw std::invalid_argument(
          "grid mapping polar_stereographic needs standard_parallel or "
          "scale_factor_at_projection_origin");
    }
  } else if (gm_name == "stereographic") {
    s = "+proj=stere";
    add("lat_0", lat("latitude_of_projection_origin"));
    add("lon_0", lon("longitude_of_projection_origin"));
    if (auto k0 = p.optional("scale_factor_at_projection_origin"))
      add("k_0", CfParameters::scale("scale_factor_at_projection_origin", *k0));
  } else if (gm_name == "lambert_azimuthal_equal_area") {
    s = "+proj=laea";
    add("lat_0", lat("latitude_of_projection_origin"));
    add("lon_0", lon("longitude_of_projection_origin"));
  } else if (gm_name == "azimuthal_equidistant") {
    s = "+proj=aeqd";
    add("lat_0", lat("latitude_of_projection_origin"));
    add("lon_0", lon("longitude_of_projection_origin"));
  } else if (gm_name == "orthographic") {
    s = "+proj=ortho";
    add("lat_0", lat("latitude_of_projection_origin"));
    add("lon_0", lon("longitude_of_projection_origin"));
  } else if (gm_name == "lambert_conformal_conic" || gm_name == "albers_conical_equal_area") {
    const auto sp = standard_parallels(2);
    if (sp.empty())
      throw std::invalid_argument(
          "grid mapping attribute standard_parallel is missing (needed by " + gm_name + ")");
    s = gm_name == "lambert_conformal_conic" ? "+proj=lcc" : "+proj=aea";
    add("lat_1", sp[0]);
    add("lat_2", sp.size() > 1 ? sp[1] : sp[0]);
    if (sp.size() > 1 && std::fabs(sp[0] + sp[1]) < 1e-9)
      throw std::invalid_argument("grid mapping " + gm_name + ": standard parallels " +
                                  short_number(sp[0]) + " and " + short_number(sp[1]) +
                                  " are symmetric about the equator (no cone)");
    add("lat_0", lat("latitude_of_projection_origin"));
    add("lon_0", lon("longitude_of_central_meridian"));
    if (gm_name == "lambert_conformal_conic")
      if (auto k0 = p.optional("scale_factor_at_projection_origin"))
        add("k_0", CfParameters::scale("scale_factor_at_projection_origin", *k0));
  } else if (gm_name == "transverse_mercator") {
    s = "+proj=tmerc";
    add("lat_0", CfParameters::latitude("latitude_of_projection_origin",
                                        p.optional("latitude_of_projection_origin").value_or(0.0)));
    add("lon_0", lon("longitude_of_central_meridian"));
    add("k_0", CfParameters::scale("scale_factor_at_central_meridian",
                                   p.optional("scale_factor_at_central_meridian").value_or(1.0)));
  } else if (gm_name == "mercator" || gm_name == "lambert_cylindrical_equal_area") {
    const bool merc = gm_name == "mercator";
    s = merc ? "+proj=merc" : "+proj=cea";
    add("lon_0", lon(merc ? "longitude_of_projection_origin" : "longitude_of_central_meridian"));
    const auto sp = standard_parallels(1);
    const auto k0 = p.optional("scale_factor_at_projection_origin");
    if (!sp.empty() && k0)
      throw std::invalid_argument("grid mapping " + gm_name +
                                  ": give standard_parallel or scale_factor_at_projection_origin, "
                                  "not both");
    if (!sp.empty()) add("lat_ts", sp[0]);
    if (k0) add("k_0", CfParameters::scale("scale_factor_at_projection_origin", *k0));
  } else if (gm_name == "sinusoidal") {
    s = "+proj=sinu";
    add("lon_0", lon("longitude_of_projection_origin"));
  } else {
    throw std::logic_error("cf_definition: unhandled " + gm_name);
  }
  const double fe = p.optional("false_easting").value_or(0.0);
  const double fn = p.optional("false_northing").value_or(0.0);
  add("x_0", fe * m.unit_m);  // false easting is in the unit of x [5] Table F.1
  add("y_0", fn * m.unit_m);
  d.proj = s;
  d.parameters = p.used();
  d.parameters.insert(d.parameters.end(), figure.used().begin(), figure.used().end());
  return d;
}

/// The projected CRS inside CRS (bound and compound CRSs unwrapped), or null.
PJ* projected_crs(PJ_CONTEXT* ctx, PJ* crs) {
  PJ* cur = proj_clone(ctx, crs);
  for (int depth = 0; cur != nullptr && depth < 4; ++depth) {
    const PJ_TYPE t = proj_get_type(cur);
    PJ* next = nullptr;
    if (t == PJ_TYPE_PROJECTED_CRS) return cur;
    if (t == PJ_TYPE_BOUND_CRS)
      next = proj_get_source_crs(ctx, cur);
    else if (t == PJ_TYPE_COMPOUND_CRS)
      next = proj_crs_get_sub_crs(ctx, cur, 0);
    proj_destroy(cur);
    cur = next;
  }
  if (cur != nullptr) proj_destroy(cur);
  return nullptr;
}

/// PROJ definition from a WKT CRS [5] 5.6.1: its projection method and
/// parameters, with the ellipsoid written out and x/y in metres (CF x/y are
/// the projection's own easting/northing, whatever the WKT axis order).
Definition wkt_definition(const std::string& wkt) {
  PjHandle h;
  PJ* crs = proj_create(h.ctx, wkt.c_str());
  if (crs == nullptr)
    throw std::invalid_argument("grid mapping attribute crs_wkt is not a CRS PROJ can read (" +
                                proj_error(h.ctx) + ")");
  PJ* proj = projected_crs(h.ctx, crs);
  proj_destroy(crs);
  if (proj == nullptr)
    throw std::invalid_argument("grid mapping attribute crs_wkt is not a projected CRS");
  Definition d;
  d.parameters.emplace_back("crs_wkt", proj_get_name(proj) != nullptr ? proj_get_name(proj) : "?");
  const auto cleanup = [&] { proj_destroy(proj); };
  try {
    PJ* ell = proj_get_ellipsoid(h.ctx, proj);
    double a = 0, b = 0, rf = 0;
    int computed = 0;
    if (ell == nullptr || !proj_ellipsoid_get_parameters(h.ctx, ell, &a, &b, &computed, &rf)) {
      if (ell != nullptr) proj_destroy(ell);
      throw std::invalid_argument("grid mapping attribute crs_wkt has no ellipsoid PROJ can read");
    }
    proj_destroy(ell);
    if (!(a >= 6.0e6 && a <= 7.0e6))
      throw std::invalid_argument("crs_wkt: semi-major axis " + short_number(a) +
                                  " m is not an earth radius");
    const double f = (a - b) / a;
    d.ellipsoid = Ellipsoid{a, f * (2.0 - f)};
    d.ellipsoid_given = true;
    d.figure = (b == a || rf == 0.0) ? " +R=" + fmt_number(a)
                                     : " +a=" + fmt_number(a) + " +rf=" + fmt_number(rf);
    PJ* pm = proj_get_prime_meridian(h.ctx, proj);
    double pm_lon = 0, pm_unit = 0;
    if (pm != nullptr) {
      proj_prime_meridian_get_parameters(h.ctx, pm, &pm_lon, &pm_unit, nullptr);
      proj_destroy(pm);
      if (pm_lon != 0.0)
        throw std::invalid_argument(
            "crs_wkt: prime meridian other than Greenwich is not supported");
    }
    PJ* op = proj_crs_get_coordoperation(h.ctx, proj);
    const char* method = nullptr;
    if (op != nullptr) {
      proj_coordoperation_get_method_info(h.ctx, op, &method, nullptr, nullptr);
      d.name = method != nullptr ? method : "";
      proj_destroy(op);
    }
    const char* ps = proj_as_proj_string(h.ctx, proj, PJ_PROJ_5, nullptr);
    if (ps == nullptr)
      throw std::invalid_argument("crs_wkt: the projection cannot be expressed for PROJ (" +
                                  proj_error(h.ctx) + ")");
    // Keep the projection and its parameters; the figure and units are set below.
    static const char* drop[] = {"type",    "units",    "to_meter",   "no_defs", "axis", "ellps",
                                 "datum",   "a",        "b",          "rf",      "f",    "R",
                                 "towgs84", "nadgrids", "geoidgrids", "vunits",  "pm",   "wktext"};
    std::string out, tok;
    std::istringstream in(ps);
    while (in >> tok) {
      const std::string key =
          tok.substr(tok[0] == '+' ? 1 : 0, tok.find('=') == std::string::npos
                                                ? std::string::npos
                                                : tok.find('=') - (tok[0] == '+' ? 1 : 0));
      bool keep = true;
      for (const char* k : drop) keep = keep && key != k;
      if (keep) out += (out.empty() ? "" : " ") + tok;
    }
    d.proj = out;
  } catch (...) {
    cleanup();
    throw;
  }
  cleanup();
  return d;
}

// CF Appendix F names: projected ones handled above, the rest refused clearly.
const std::vector<std::string>& supported_mappings() {
  static const std::vector<std::string> v = {"polar_stereographic",
                                             "stereographic",
                                             "lambert_azimuthal_equal_area",
                                             "lambert_conformal_conic",
                                             "transverse_mercator",
                                             "albers_conical_equal_area",
                                             "azimuthal_equidistant",
                                             "mercator",
                                             "lambert_cylindrical_equal_area",
                                             "orthographic",
                                             "sinusoidal"};
  return v;
}
const std::vector<std::string>& unsupported_cf_mappings() {
  static const std::vector<std::string> v = {"latitude_longitude", "rotated_latitude_longitude",
                                             "geostationary",      "vertical_perspective",
                                             "oblique_mercator",   "healpix"};
  return v;
}

std::string join_names(const std::vector<std::string>& v) {
  std::string s;
  for (const auto& x : v) s += (s.empty() ? "" : ", ") + x;
  return s;
}

double wrap180(double lon) {
  double x = std::remainder(lon, 360.0);
  if (x == 180.0) x = -180.0;
  return x;
}

}  // namespace

Ellipsoid ellipsoid_of(EarthModel model) {
  if (model == EarthModel::sphere) return Ellipsoid{earth::mean_radius, 0.0};
  return Ellipsoid{earth::wgs84_a, earth::wgs84_e2};
}

double meridional_radius(const Ellipsoid& ell, double lat_rad) {
  // M = a (1 - e2) / (1 - e2 sin^2 phi)^(3/2)   [1]; REFERENCES.md §4
  const double s = std::sin(lat_rad);
  const double w2 = 1.0 - ell.e2 * s * s;
  return ell.a * (1.0 - ell.e2) / (w2 * std::sqrt(w2));
}

double prime_vertical_radius(const Ellipsoid& ell, double lat_rad) {
  // N = a / (1 - e2 sin^2 phi)^(1/2)   [1]
  const double s = std::sin(lat_rad);
  return ell.a / std::sqrt(1.0 - ell.e2 * s * s);
}

// ---- Projection ----------------------------------------------------------------------

struct Projection::Impl {
  Definition def;
  std::string definition;  // def.proj + ellipsoid + units
  std::unique_ptr<PjHandle> pj;
  std::unique_ptr<PjHandle> wkt_pj;  // crs_wkt's projection, when given with grid_mapping_name
};

Projection::Projection(const GridMapping& mapping) : impl_(std::make_unique<Impl>()) {
  std::string name;
  if (auto it = mapping.texts.find("grid_mapping_name"); it != mapping.texts.end())
    name = lower_trim(it->second);
  else if (mapping.numbers.count("grid_mapping_name") != 0U)
    throw std::invalid_argument("grid mapping attribute grid_mapping_name is not text");
  std::string wkt;
  for (const char* key : {"crs_wkt", "spatial_ref"})
    if (auto it = mapping.texts.find(key); it != mapping.texts.end() && wkt.empty())
      wkt = it->second;
  if (name.empty() && wkt.empty())
    throw std::invalid_argument("grid mapping variable has neither grid_mapping_name nor crs_wkt");

  std::optional<Definition> from_wkt;
  if (!wkt.empty()) from_wkt = wkt_definition(wkt);
  if (!name.empty()) {
    const auto& ok = supported_mappings();
    const auto& cf_other = unsupported_cf_mappings();
    if (std::find(ok.begin(), ok.end(), name) == ok.end()) {
      if (std::find(cf_other.begin(), cf_other.end(), name) != cf_other.end())
        throw std::invalid_argument(
            "grid_mapping_name \"" + name +
            "\" is not supported for x/y grids (supported: " + join_names(ok) + ")");
      throw std::invalid_argument(
          "unknown grid_mapping_name \"" + name +
          "\" (not a CF 1.12 Appendix F name; supported: " + join_names(ok) + ")");
    }
    impl_->def = cf_definition(mapping, name);
    if (!impl_->def.ellipsoid_given && from_wkt) {
      impl_->def.ellipsoid = from_wkt->ellipsoid;
      impl_->def.figure = from_wkt->figure;
      impl_->def.parameters.emplace_back("ellipsoid from", "crs_wkt");
    }
  } else {
    impl_->def = *from_wkt;
  }
  impl_->def.parameters.emplace_back("ellipsoid", ellipsoid_text(impl_->def.ellipsoid));
  const std::string figure =
      impl_->def.figure.empty() ? ellipsoid_tokens(impl_->def.ellipsoid) : impl_->def.figure;
  impl_->definition = impl_->def.proj + figure + " +units=m +no_defs";
  impl_->pj = std::make_unique<PjHandle>(impl_->definition);
  if (!name.empty() && from_wkt)
    impl_->wkt_pj = std::make_unique<PjHandle>(
        from_wkt->proj +
        (from_wkt->figure.empty() ? ellipsoid_tokens(from_wkt->ellipsoid) : from_wkt->figure) +
        " +units=m +no_defs");
}

Projection::~Projection() = default;
Projection::Projection(Projection&&) noexcept = default;
Projection& Projection::operator=(Projection&&) noexcept = default;

const std::string& Projection::name() const { return impl_->def.name; }
const std::string& Projection::definition() const { return impl_->definition; }
const Ellipsoid& Projection::ellipsoid() const { return impl_->def.ellipsoid; }
const std::vector<std::pair<std::string, std::string>>& Projection::parameters() const {
  return impl_->def.parameters;
}
bool Projection::has_wkt_alternative() const { return impl_->wkt_pj != nullptr; }

namespace {
void inverse_with(PJ* pj, double x, double y, double& lat_deg, double& lon_deg) {
  proj_errno_reset(pj);
  const PJ_COORD lp = proj_trans(pj, PJ_INV, proj_coord(x, y, 0, 0));
  if (proj_errno(pj) != 0 || !std::isfinite(lp.lp.lam) || !std::isfinite(lp.lp.phi) ||
      std::fabs(lp.lp.phi) > pi / 2 + 1e-12) {
    lat_deg = lon_deg = nan_value;
    return;
  }
  lat_deg = lp.lp.phi / deg;
  lon_deg = wrap180(lp.lp.lam / deg);
}
}  // namespace

void Projection::inverse(double x, double y, double& lat_deg, double& lon_deg) const {
  inverse_with(impl_->pj->pj, x, y, lat_deg, lon_deg);
}

void Projection::forward(double lat_deg, double lon_deg, double& x, double& y) const {
  PJ* pj = impl_->pj->pj;
  proj_errno_reset(pj);
  const PJ_COORD xy = proj_trans(pj, PJ_FWD, proj_coord(lon_deg * deg, lat_deg * deg, 0, 0));
  if (proj_errno(pj) != 0 || !std::isfinite(xy.xy.x) || !std::isfinite(xy.xy.y)) {
    x = y = nan_value;
    return;
  }
  x = xy.xy.x;
  y = xy.xy.y;
}

ProjectionFactors Projection::factors(double x, double y) const {
  ProjectionFactors out;
  inverse(x, y, out.lat_deg, out.lon_deg);
  out.meridional_scale = out.parallel_scale = out.areal_scale = out.angular_distortion =
      out.convergence_deg = nan_value;
  if (std::isnan(out.lat_deg)) return out;
  PJ* pj = impl_->pj->pj;
  proj_errno_reset(pj);
  const PJ_FACTORS f = proj_factors(pj, proj_coord(out.lon_deg * deg, out.lat_deg * deg, 0, 0));
  if (proj_errno(pj) != 0) return out;
  out.meridional_scale = f.meridional_scale;
  out.parallel_scale = f.parallel_scale;
  out.areal_scale = f.areal_scale;
  out.angular_distortion = f.angular_distortion / deg;
  out.convergence_deg = f.meridian_convergence / deg;
  return out;
}

double Projection::disagreement_m(double x, double y) const {
  if (!impl_->wkt_pj) return 0.0;
  double la1 = 0, lo1 = 0, la2 = 0, lo2 = 0;
  inverse_with(impl_->pj->pj, x, y, la1, lo1);
  inverse_with(impl_->wkt_pj->pj, x, y, la2, lo2);
  if (std::isnan(la1) != std::isnan(la2)) return std::numeric_limits<double>::infinity();
  if (std::isnan(la1)) return 0.0;
  // Great-circle angle between the two positions (haversine) on R1 [2].
  const double dphi = (la2 - la1) * deg, dlam = std::remainder(lo2 - lo1, 360.0) * deg;
  const double h =
      std::sin(dphi / 2) * std::sin(dphi / 2) +
      std::cos(la1 * deg) * std::cos(la2 * deg) * std::sin(dlam / 2) * std::sin(dlam / 2);
  return 2.0 * earth::mean_radius * std::asin(std::min(1.0, std::sqrt(h)));
}

// ---- CurvilinearGrid -------------------------------------------------------------------

CurvilinearGrid::~CurvilinearGrid() = default;
CurvilinearGrid::CurvilinearGrid(CurvilinearGrid&&) noexcept = default;
CurvilinearGrid& CurvilinearGrid::operator=(CurvilinearGrid&&) noexcept = default;

namespace {
double median(std::vector<double> v) {
  if (v.empty()) return nan_value;
  const auto mid = v.begin() + static_cast<std::ptrdiff_t>(v.size() / 2);
  std::nth_element(v.begin(), mid, v.end());
  return *mid;
}

std::string node_text(std::size_t j, std::size_t i) {
  return "(row " + std::to_string(j) + ", column " + std::to_string(i) + ")";
}
}  // namespace

CurvilinearGrid::CurvilinearGrid(const GridMapping& mapping, std::vector<double> x_m,
                                 std::vector<double> y_m)
    : ny_(y_m.size()), nx_(x_m.size()), col_(std::move(x_m)), row_(std::move(y_m)) {
  check_axis(col_, "x");
  check_axis(row_, "y");
  projection_ = std::make_unique<Projection>(mapping);
  ellipsoid_ = projection_->ellipsoid();
  const std::size_t n = ny_ * nx_;
  lat_deg_.assign(n, nan_value);
  lon_deg_.assign(n, nan_value);
  metric_.assign(n, DirectionalMetric{});
  const std::string def = projection_->definition();
  const Ellipsoid ell = ellipsoid_;
  std::size_t first_bad = n;
  bool setup_failed = false;
#pragma omp parallel
  {
    // One PROJ context and object per thread (PROJ objects are not thread-safe).
    std::unique_ptr<PjHandle> h;
    try {
      h = std::make_unique<PjHandle>(def);
    } catch (...) {
#pragma omp critical(seatilt_grid_bad)
      setup_failed = true;
    }
#pragma omp for schedule(static)
    for (long k = 0; k < static_cast<long>(n); ++k) {
      if (!h) continue;
      const auto kk = static_cast<std::size_t>(k);
      const std::size_t j = kk / nx_, i = kk % nx_;
      double lat = 0, lon = 0;
      inverse_with(h->pj, col_[i], row_[j], lat, lon);
      bool ok = !std::isnan(lat);
      DirectionalMetric b{nan_value, nan_value, nan_value, nan_value};
      if (ok && pi / 2 - std::fabs(lat * deg) >= pole_colatitude_rad) {
        const double phi = lat * deg;
        proj_errno_reset(h->pj);
        const PJ_FACTORS f = proj_factors(h->pj, proj_coord(lon * deg, phi, 0, 0));
        const double ncos = prime_vertical_radius(ell, phi) * std::cos(phi);
        const double m = meridional_radius(ell, phi);
        // dX/de = a dx_dlam / (N cos phi), dX/dn = a dx_dphi / M, likewise Y [6];
        // B = J^T: d/de = dX/de d/dX + dY/de d/dY (grid.hpp "Method").
        b.e_c = ell.a * f.dx_dlam / ncos;
        b.e_r = ell.a * f.dy_dlam / ncos;
        b.n_c = ell.a * f.dx_dphi / m;
        b.n_r = ell.a * f.dy_dphi / m;
        ok = proj_errno(h->pj) == 0 && std::isfinite(b.e_c) && std::isfinite(b.e_r) &&
             std::isfinite(b.n_c) && std::isfinite(b.n_r);
      }
      lat_deg_[kk] = lat;
      lon_deg_[kk] = lon;
      metric_[kk] = b;
      if (!ok) {
#pragma omp critical(seatilt_grid_bad)
        first_bad = std::min(first_bad, kk);
      }
    }
  }
  if (setup_failed) throw std::runtime_error("PROJ: cannot create a per-thread projection");
  if (first_bad < n) {
    const std::size_t j = first_bad / nx_, i = first_bad % nx_;
    throw std::invalid_argument("node " + node_text(j, i) + " at x = " + short_number(col_[i]) +
                                " m, y = " + short_number(row_[j]) +
                                " m is outside the domain of the projection " +
                                projection_->definition());
  }
  std::vector<double> steps;
  for (std::size_t i = 1; i < nx_; ++i) steps.push_back(std::fabs(col_[i] - col_[i - 1]));
  for (std::size_t j = 1; j < ny_; ++j) steps.push_back(std::fabs(row_[j] - row_[j - 1]));
  spacing_m_ = median(steps);

  if (projection_->has_wkt_alternative()) {
    const std::size_t js[] = {0, ny_ - 1, 0, ny_ - 1, ny_ / 2};
    const std::size_t is[] = {0, 0, nx_ - 1, nx_ - 1, nx_ / 2};
    for (int k = 0; k < 5; ++k) {
      const double d = projection_->disagreement_m(col_[is[k]], row_[js[k]]);
      if (d > 0.01 * spacing_m_)
        throw std::invalid_argument(
            "grid_mapping attributes and crs_wkt disagree: they place node " +
            node_text(js[k], is[k]) + " " + short_number(d) + " m apart (CF 1.12 section 5.6.1)");
    }
  }
}

CurvilinearGrid::CurvilinearGrid(std::size_t ny, std::size_t nx, std::vector<double> lat_deg,
                                 std::vector<double> lon_deg, EarthModel earth)
    : ny_(ny),
      nx_(nx),
      lat_deg_(std::move(lat_deg)),
      lon_deg_(std::move(lon_deg)),
      ellipsoid_(ellipsoid_of(earth)) {
  if (ny_ < 2 || nx_ < 2)
    throw std::invalid_argument("2-D latitude/longitude grid has fewer than 2 rows or columns");
  const std::size_t n = ny_ * nx_;
  if (lat_deg_.size() != n || lon_deg_.size() != n)
    throw std::invalid_argument("2-D latitude/longitude sizes differ from rows x columns");
  for (std::size_t k = 0; k < n; ++k) {
    if (!std::isfinite(lat_deg_[k]) || !std::isfinite(lon_deg_[k]))
      throw std::invalid_argument(
          "2-D latitude/longitude hold a missing or non-finite value at node " +
          node_text(k / nx_, k % nx_));
    if (std::fabs(lat_deg_[k]) > 90.0)
      throw std::invalid_argument("2-D latitude outside [-90, 90] at node " +
                                  node_text(k / nx_, k % nx_));
  }
  col_.resize(nx_);
  row_.resize(ny_);
  for (std::size_t i = 0; i < nx_; ++i) col_[i] = static_cast<double>(i);
  for (std::size_t j = 0; j < ny_; ++j) row_[j] = static_cast<double>(j);

  // Node positions on the ellipsoid (ECEF, m) [1]:
  //   X = N cos(phi) cos(lambda), Y = N cos(phi) sin(lambda), Z = N (1 - e2) sin(phi).
  std::vector<double> pos(3 * n);
  for (std::size_t k = 0; k < n; ++k) {
    double sp = 0, cp = 0, sl = 0, cl = 0;
    sincosd(lat_deg_[k], sp, cp);
    sincosd(lon_deg_[k], sl, cl);
    const double nn = ellipsoid_.a / std::sqrt(1.0 - ellipsoid_.e2 * sp * sp);
    pos[3 * k] = nn * cp * cl;
    pos[3 * k + 1] = nn * cp * sl;
    pos[3 * k + 2] = nn * (1.0 - ellipsoid_.e2) * sp;
  }
  metric_.assign(n, DirectionalMetric{});
  std::vector<double> spacing(n, nan_value);
  std::size_t first_bad = n;
#pragma omp parallel for schedule(static)
  for (long kl = 0; kl < static_cast<long>(n); ++kl) {
    const auto k = static_cast<std::size_t>(kl);
    const long j = static_cast<long>(k / nx_), i = static_cast<long>(k % nx_);
    DirectionalMetric b{nan_value, nan_value, nan_value, nan_value};
    if (std::fabs(lat_deg_[k]) >= 90.0 - 1e-9) {  // pole: no east
      metric_[k] = b;
      continue;
    }
    double sp = 0, cp = 0, sl = 0, cl = 0;
    sincosd(lat_deg_[k], sp, cp);
    sincosd(lon_deg_[k], sl, cl);
    const double east[3] = {-sl, cl, 0.0};             // e_hat
    const double north[3] = {-sp * cl, -sp * sl, cp};  // n_hat
    const double* p0 = &pos[3 * k];
    // Tangent-plane coordinate of the node at offset m along one index
    // direction: (P_m - P_0) . unit; NaN outside the grid.
    const auto along = [&](long dj, long di, const double* unit) {
      return [&, dj, di, unit](int m) {
        const long jj = j + dj * m, ii = i + di * m;
        if (jj < 0 || ii < 0 || jj >= static_cast<long>(ny_) || ii >= static_cast<long>(nx_))
          return nan_value;
        const double* p = &pos[3 * static_cast<std::size_t>(jj * static_cast<long>(nx_) + ii)];
        return (p[0] - p0[0]) * unit[0] + (p[1] - p0[1]) * unit[1] + (p[2] - p0[2]) * unit[2];
      };
    };
    const auto index = [](int m) { return static_cast<double>(m); };
    // D = d(E, N)/d(i, j) with the widest centred stencil that fits (7-point).
    const double ei = detail::ladder_d1(along(0, 1, east), index, 3, true).value;
    const double ni = detail::ladder_d1(along(0, 1, north), index, 3, true).value;
    const double ej = detail::ladder_d1(along(1, 0, east), index, 3, true).value;
    const double nj = detail::ladder_d1(along(1, 0, north), index, 3, true).value;
    const double det = ei * nj - ni * ej;
    const double scale2 = ei * ei + ni * ni + ej * ej + nj * nj;
    if (!(std::fabs(det) > 1e-8 * scale2)) {
#pragma omp critical(seatilt_grid_bad)
      first_bad = std::min(first_bad, k);
      continue;
    }
    // B = D^-T: (d/de, d/dn) = (1/det) (nj d/di - ni d/dj, -ej d/di + ei d/dj).
    b.e_c = nj / det;
    b.e_r = -ni / det;
    b.n_c = -ej / det;
    b.n_r = ei / det;
    metric_[k] = b;
    spacing[k] = std::min(std::hypot(ei, ni), std::hypot(ej, nj));
  }
  if (first_bad < n)
    throw std::invalid_argument("2-D latitude/longitude do not form a grid around node " +
                                node_text(first_bad / nx_, first_bad % nx_) +
                                " (neighbouring nodes coincide or lie on one line)");
  std::vector<double> s;
  for (double x : spacing)
    if (std::isfinite(x)) s.push_back(x);
  spacing_m_ = median(std::move(s));
}

}  // namespace seatilt
