// inmemory.cpp — the `currents` computation on heights held in memory (see inmemory.hpp).
//
// Notation (as tiling.cpp): t time step; j global row; band rows [j0, j0 + n);
// velocity rows [v0, v1) = band +- hd (diagnostic halo); height rows
// [e0, e1) = velocity rows +- hv (velocity halo), all clipped to [0, ny).
// Heights in metres (NaN missing), velocities m s-1, diagnostics s-1 / s-2.
#include "seatilt/inmemory.hpp"

#include <netcdf.h>
#include <omp.h>
#include <udunits2.h>

#include <algorithm>
#include <array>
#include <cctype>
#include <cfloat>
#include <cmath>
#include <cstring>
#include <limits>
#include <memory>
#include <mutex>
#include <stdexcept>

#include "seatilt/diagnostics.hpp"
#include "seatilt/error.hpp"
#include "seatilt/product.hpp"
#include "seatilt/writer.hpp"

namespace seatilt {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

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

/// "SOURCE: variable VARIABLE: PROBLEM" (input_message), without the parts
/// that are empty (arrays in memory have no file).
std::string memory_message(const std::string& source, const std::string& variable,
                           const std::string& problem) {
  if (!source.empty()) return input_message(source, variable, problem);
  return variable.empty() ? problem : "variable " + variable + ": " + problem;
}

[[noreturn]] void fail(const std::string& source, const std::string& variable,
                       const std::string& problem) {
  throw InputError(memory_message(source, variable, problem));
}

// ---- UDUNITS-2 [2] ------------------------------------------------------------------
// One unit system per process, read lazily; the parser is not thread-safe,
// so every call runs under one mutex.

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

// ---- values ---------------------------------------------------------------------------

/// Reads element K of type T at BASE + OFFSET bytes as a double.
template <class T>
double element(const unsigned char* p) {
  T v;
  std::memcpy(&v, p, sizeof v);
  return static_cast<double>(v);
}

using ElementReader = double (*)(const unsigned char*);

ElementReader reader_of(chunkio::ElementType t) {
  using E = chunkio::ElementType;
  switch (t) {
    case E::i8: return element<std::int8_t>;
    case E::u8: return element<std::uint8_t>;
    case E::i16: return element<std::int16_t>;
    case E::u16: return element<std::uint16_t>;
    case E::i32: return element<std::int32_t>;
    case E::u32: return element<std::uint32_t>;
    case E::i64: return element<std::int64_t>;
    case E::u64: return element<std::uint64_t>;
    case E::f32: return element<float>;
    case E::f64: return element<double>;
  }
  return element<double>;
}

bool is_signed_integer(chunkio::ElementType t) {
  using E = chunkio::ElementType;
  return t == E::i8 || t == E::i16 || t == E::i32 || t == E::i64;
}

/// The reader's unpacking rule (reader.cpp Reader::Impl::unpack) for one value.
struct Unpacker {
  explicit Unpacker(const Unpacking& u, chunkio::ElementType type)
      : sf(u.scale_factor),
        ao(u.add_offset),
        sc(u.to_metres_scale),
        of(u.to_metres_offset),
        lo(u.valid_min.value_or(-std::numeric_limits<double>::infinity())),
        hi(u.valid_max.value_or(std::numeric_limits<double>::infinity())),
        has_fill(u.fill_value.has_value()),
        fill(u.fill_value.value_or(0.0)),
        missing(u.missing_values),
        wrap(u.unsigned_data && is_signed_integer(type)
                 ? std::ldexp(1.0, static_cast<int>(8 * chunkio::element_size(type)))
                 : 0.0) {}

  [[nodiscard]] double operator()(double raw) const {
    if (wrap != 0.0 && raw < 0.0) raw += wrap;
    // NaN-safe: !(lo <= raw && raw <= hi) is true for NaN.
    bool gone = !std::isfinite(raw) || !(lo <= raw && raw <= hi) || (has_fill && raw == fill);
    for (double mv : missing) gone = gone || raw == mv;
    return gone ? nan : (raw * sf + ao) * sc + of;  // [1] 8.1 unpack, then UDUNITS to metres
  }

  double sf, ao, sc, of, lo, hi;
  bool has_fill;
  double fill;
  std::vector<double> missing;
  double wrap;
};

/// The float32 that a reader of the file gets for V: V as the writer stores
/// it (output_float), NaN where that is _FillValue.
float as_read_back(double v) {
  constexpr float file_fill = 9.9692099683868690e+36f;  // NC_FILL_FLOAT, writer.hpp
  const float f = output_float(v);
  return f == file_fill ? std::numeric_limits<float>::quiet_NaN() : f;
}

/// Which computed array an output takes its values from (tiling.cpp's list).
enum class Source : std::uint8_t {
  u, v, speed, vorticity, strain_normal, strain_shear, strain, okubo_weiss, quality
};

Source source_of(const std::string& n) {
  if (n == "quality") return Source::quality;
  if (n == "u") return Source::u;
  if (n == "v") return Source::v;
  if (n == "speed") return Source::speed;
  if (n == "vorticity") return Source::vorticity;
  if (n == "strain_normal") return Source::strain_normal;
  if (n == "strain_shear") return Source::strain_shear;
  if (n == "strain") return Source::strain;
  if (n == "okubo_weiss") return Source::okubo_weiss;
  throw UsageError("--fields: unknown field '" + n + "'");
}

/// Rows per band: about 16 MiB of band buffers (~100 bytes per cell: heights,
/// u, v, flags, six diagnostics), at least 16 rows (rule of thumb, no source;
/// the result does not depend on it).
std::size_t band_rows(std::size_t nx) {
  constexpr double budget = 16.0 * (1 << 20), per_cell = 100.0;
  const auto r = static_cast<std::size_t>(budget / (per_cell * static_cast<double>(nx)));
  return std::max<std::size_t>(r, 16);
}

/// Restores the calling thread's OpenMP thread count on scope exit.
class ThreadCount {
public:
  explicit ThreadCount(int n) : saved_(omp_get_max_threads()) {
    if (n > 0) omp_set_num_threads(n);
  }
  ~ThreadCount() { omp_set_num_threads(saved_); }
  ThreadCount(const ThreadCount&) = delete;
  ThreadCount& operator=(const ThreadCount&) = delete;

private:
  int saved_;
};

}  // namespace

// ---- options ------------------------------------------------------------------------------

CurrentsOptions currents_options_from_text(const CurrentsOptionText& text) {
  CurrentsOptions o;
  o.order = text.order;
  // The command line's messages (src/cli/main.cpp equator_option ... gravity_option).
  if (!parse_equator(text.equator, o.equator))
    throw UsageError("--equator: '" + text.equator + "' is not one of mask, beta, blend");
  o.equator_band_deg = text.equator_band_deg;
  if (!parse_coast(text.coast, o.coast))
    throw UsageError("--coast: '" + text.coast + "' is not one of one-sided, mask");
  if (!parse_earth(text.earth, o.earth))
    throw UsageError("--earth: '" + text.earth + "' is not one of sphere, wgs84");
  if (!parse_gravity_name(text.gravity, o.gravity)) {
    char* end = nullptr;
    const double g = std::strtod(text.gravity.c_str(), &end);
    if (end == text.gravity.c_str() || *end != '\0')
      throw UsageError("--gravity: '" + text.gravity +
                       "' is not standard, wgs84 or a number in m s-2");
    o.gravity = GravityModel::constant;
    o.gravity_value = g;
  }
  validate(o);
  return o;
}

// ---- CF metadata ----------------------------------------------------------------------------

HeightStandardName classify_height_standard_name(const std::string& standard_name) {
  // CF standard-name table v83 [1] 3.3 (reader.cpp classify_height_name).
  const std::string s = trim(standard_name);
  if (s == "sea_surface_height_above_geoid" || s == "sea_surface_height_above_geopotential_datum")
    return HeightStandardName::absolute;
  if (s == "sea_surface_height_above_mean_sea_level" ||
      s == "sea_surface_height_above_sea_level" || s == "sea_surface_height")
    return HeightStandardName::anomaly;
  if (s == "sea_surface_height_above_reference_ellipsoid") return HeightStandardName::ellipsoid;
  return HeightStandardName::none;
}

CoordinateAxis classify_coordinate(const std::string& units, const std::string& standard_name,
                                   const std::string& axis) {
  // [1] 4.1 (latitude), 4.2 (longitude), 4.4 (time); reader.cpp classify_coordinate.
  static const std::array<const char*, 6> north = {"degrees_north", "degree_north", "degree_n",
                                                    "degrees_n",     "degreen",      "degreesn"};
  static const std::array<const char*, 6> east = {"degrees_east", "degree_east", "degree_e",
                                                   "degrees_e",    "degreee",     "degreese"};
  const std::string u = lower(trim(units)), sn = trim(standard_name), ax = lower(trim(axis));
  const bool degrees = u.rfind("degree", 0) == 0;
  const auto in = [&](const std::array<const char*, 6>& names) {
    return std::find(names.begin(), names.end(), u) != names.end();
  };
  if (in(north) || sn == "latitude" || (ax == "y" && degrees)) return CoordinateAxis::latitude;
  if (in(east) || sn == "longitude" || (ax == "x" && degrees)) return CoordinateAxis::longitude;
  const auto since = u.find(" since ");
  if (sn == "time" || ax == "t" || (since != std::string::npos && since > 0))
    return CoordinateAxis::time;
  return CoordinateAxis::none;
}

bool says_anomaly(const std::string& text) {
  const std::string t = lower(text);
  if (t.find("anomal") != std::string::npos) return true;
  std::string token;
  for (std::size_t k = 0; k <= t.size(); ++k) {
    if (k < t.size() && std::isalnum(static_cast<unsigned char>(t[k]))) {
      token += t[k];
    } else {
      if (token == "sla") return true;
      token.clear();
    }
  }
  return false;
}

bool length_units_to_metres(const std::string& units, double& scale, double& offset,
                            std::string& why) {
  std::lock_guard<std::mutex> lock(units_mutex());
  ut_system* system = unit_system();
  if (!system)
    throw InputError("the UDUNITS-2 unit database could not be read (check UDUNITS2_XML_PATH)");
  std::string buffer = units;
  char* text = ut_trim(buffer.data(), UT_UTF8);
  std::unique_ptr<ut_unit, UnitFree> from(ut_parse(system, text, UT_UTF8));
  if (!from) {
    why = "not understood by UDUNITS-2";
    return false;
  }
  std::unique_ptr<ut_unit, UnitFree> metre(ut_parse(system, "m", UT_ASCII));
  if (!metre)
    throw InputError("the UDUNITS-2 unit database could not be read (check UDUNITS2_XML_PATH)");
  std::unique_ptr<cv_converter, ConverterFree> cv(
      ut_are_convertible(from.get(), metre.get()) ? ut_get_converter(from.get(), metre.get())
                                                  : nullptr);
  if (!cv) {
    why = "not a length";
    return false;
  }
  // The converter of a length unit to m is linear: two evaluations give it exactly.
  offset = cv_convert_double(cv.get(), 0.0);
  scale = cv_convert_double(cv.get(), 1.0) - offset;
  return true;
}

namespace {

std::string attribute(const VariableDescription& v, const char* name) {
  const auto it = v.text.find(name);
  return it == v.text.end() ? std::string() : trim(it->second);
}

CoordinateAxis axis_of(const VariableDescription& v) {
  if (v.decoded_time) return CoordinateAxis::time;
  return classify_coordinate(attribute(v, "units"), attribute(v, "standard_name"),
                             attribute(v, "axis"));
}

std::string dims_text(const VariableDescription& v) {
  std::vector<std::string> parts;
  for (std::size_t k = 0; k < v.dims.size(); ++k)
    parts.push_back(v.dims[k] + "=" + std::to_string(k < v.shape.size() ? v.shape[k] : 0));
  return "(" + join(parts, ", ") + ")";
}

const char* ellipsoid_refusal =
    "standard_name sea_surface_height_above_reference_ellipsoid is refused: an "
    "ellipsoidal height includes the geoid (about +-100 m), whose slopes are not "
    "geostrophic; subtract a geoid first and give heights above the geoid or above "
    "mean sea level";

/// The reader's choose_variable on descriptions.
std::size_t choose_height(const std::vector<VariableDescription>& vars, const std::string& variable,
                          const std::string& source) {
  if (!variable.empty()) {
    for (std::size_t k = 0; k < vars.size(); ++k) {
      if (vars[k].name != variable) continue;
      if (classify_height_standard_name(attribute(vars[k], "standard_name")) ==
          HeightStandardName::ellipsoid)
        fail(source, variable, ellipsoid_refusal);
      return k;
    }
    std::vector<std::string> names;
    for (const auto& v : vars) names.push_back(v.name);
    fail(source, variable,
         "not found in the dataset (variables: " +
             (names.empty() ? std::string("none") : join(names, ", ")) + ")");
  }
  std::vector<std::size_t> heights, ellipsoidal;
  for (std::size_t k = 0; k < vars.size(); ++k) {
    const auto h = classify_height_standard_name(attribute(vars[k], "standard_name"));
    if (h == HeightStandardName::absolute || h == HeightStandardName::anomaly) heights.push_back(k);
    if (h == HeightStandardName::ellipsoid) ellipsoidal.push_back(k);
  }
  if (heights.size() == 1) return heights[0];
  if (heights.size() > 1) {
    std::vector<std::string> names;
    for (std::size_t k : heights)
      names.push_back(vars[k].name + " (" + attribute(vars[k], "standard_name") + ")");
    fail(source, "",
         "several variables have a CF sea-surface-height standard_name: " + join(names, ", ") +
             "; choose one with variable=");
  }
  if (!ellipsoidal.empty()) fail(source, vars[ellipsoidal[0]].name, ellipsoid_refusal);

  // No CF height name: list numeric variables on latitude/longitude dimensions.
  std::vector<std::string> lat_dims, lon_dims;
  for (const auto& v : vars) {
    if (v.dims.size() != 1) continue;
    const CoordinateAxis a = axis_of(v);
    if (a == CoordinateAxis::latitude) lat_dims.push_back(v.dims[0]);
    if (a == CoordinateAxis::longitude) lon_dims.push_back(v.dims[0]);
  }
  const auto has = [](const std::vector<std::string>& set, const std::vector<std::string>& dims) {
    return std::any_of(dims.begin(), dims.end(), [&](const std::string& d) {
      return std::find(set.begin(), set.end(), d) != set.end();
    });
  };
  std::vector<std::string> candidates;
  for (const auto& v : vars) {
    if (v.dims.size() < 2 || !v.numeric) continue;
    if (!has(lat_dims, v.dims) || !has(lon_dims, v.dims)) continue;
    const std::string sn = attribute(v, "standard_name");
    candidates.push_back(sn.empty() ? v.name : v.name + " (" + sn + ")");
  }
  const std::string names =
      "sea_surface_height_above_geoid, sea_surface_height_above_geopotential_datum, "
      "sea_surface_height_above_mean_sea_level, sea_surface_height_above_sea_level, "
      "sea_surface_height";
  if (candidates.empty())
    fail(source, "",
         "no height variable: no variable has a CF sea-surface-height standard_name (" + names +
             ") and no numeric variable lies on latitude/longitude dimensions");
  fail(source, "",
       "no variable has a CF sea-surface-height standard_name (" + names +
           "); candidates on latitude/longitude dimensions: " + join(candidates, ", ") +
           "; choose one with variable=");
}

/// The reader's resolve_kind on a description.
void resolve_kind(const VariableDescription& v, DatasetLayout& out) {
  const std::string sn = attribute(v, "standard_name");
  const auto h = classify_height_standard_name(sn);
  if (h == HeightStandardName::absolute) {
    out.kind = HeightKind::absolute;
    out.kind_reason = "standard_name " + sn + " (height above the geoid)";
  } else if (h == HeightStandardName::anomaly) {
    out.kind = HeightKind::anomaly;
    out.kind_reason = "standard_name " + sn + " (height above a mean sea level)";
  } else if (says_anomaly(v.name)) {
    out.kind = HeightKind::anomaly;
    out.kind_reason = "variable name " + v.name + " says anomaly/sla";
  } else if (const std::string ln = attribute(v, "long_name"); says_anomaly(ln)) {
    out.kind = HeightKind::anomaly;
    out.kind_reason = "long_name \"" + ln + "\" says anomaly/sla";
  } else {
    out.kind = HeightKind::absolute;
    out.kind_reason =
        "no CF height standard_name and no anomaly/sla in name or long_name: assumed absolute";
  }
}

/// The reader's resolve_layout (latitude-longitude grids) on descriptions.
void resolve_layout(const std::vector<VariableDescription>& vars, DatasetLayout& out,
                    const std::string& source) {
  const VariableDescription& v = vars[out.height];
  const std::size_t nd = v.dims.size();
  std::vector<CoordinateAxis> axes(nd, CoordinateAxis::none);
  std::vector<std::optional<std::size_t>> coords(nd);
  for (std::size_t k = 0; k < nd; ++k) {
    for (std::size_t c = 0; c < vars.size(); ++c) {
      const VariableDescription& cv = vars[c];
      if (cv.dims.size() != 1 || cv.dims[0] != v.dims[k] || c == out.height) continue;
      const CoordinateAxis a = axis_of(cv);
      if (a == CoordinateAxis::none) continue;
      if (!coords[k] || cv.name == v.dims[k]) {
        coords[k] = c;
        axes[k] = a;
      }
      if (cv.name == v.dims[k]) break;
    }
  }
  const std::string layout = dims_text(v);
  const std::string expected =
      "expected (lat, lon) or (time, lat, lon), other dimensions only of size 1";
  const auto find_axis = [&](CoordinateAxis a) {
    std::vector<std::size_t> at;
    for (std::size_t k = 0; k < nd; ++k)
      if (axes[k] == a) at.push_back(k);
    return at;
  };
  const auto lat_at = find_axis(CoordinateAxis::latitude);
  const auto lon_at = find_axis(CoordinateAxis::longitude);
  if (lat_at.empty())
    fail(source, v.name,
         "no latitude coordinate among its dimensions " + layout +
             " (a 1-D variable with units degrees_north, standard_name latitude or axis Y)");
  if (lon_at.empty())
    fail(source, v.name,
         "no longitude coordinate among its dimensions " + layout +
             " (a 1-D variable with units degrees_east, standard_name longitude or axis X)");
  if (lat_at.size() > 1 || lon_at.size() > 1)
    fail(source, v.name, "several latitude or longitude dimensions " + layout + "; " + expected);
  if (nd < 2 || lon_at[0] != nd - 1 || lat_at[0] != nd - 2)
    fail(source, v.name,
         "unsupported dimension order " + layout + ": latitude is " + v.dims[lat_at[0]] +
             ", longitude is " + v.dims[lon_at[0]] + "; " + expected);
  out.lat_dim = nd - 2;
  out.lon_dim = nd - 1;
  out.lat = *coords[nd - 2];
  out.lon = *coords[nd - 1];
  for (std::size_t k = 0; k + 2 < nd; ++k) {
    const std::size_t len = k < v.shape.size() ? v.shape[k] : 0;
    if (axes[k] == CoordinateAxis::time && !out.time_dim) {
      out.time_dim = k;
      out.time = coords[k];
    } else if (len != 1) {
      fail(source, v.name,
           "unsupported dimensions " + layout + ": " + v.dims[k] + " has size " +
               std::to_string(len) +
               (axes[k] == CoordinateAxis::time
                    ? " (a second time dimension)"
                    : " and is not time (no coordinate variable with standard_name time, axis "
                      "T, units \"<unit> since <date>\" or dates as values)") +
               "; " + expected);
    }
  }
  if (out.time_dim && v.shape.at(*out.time_dim) == 0)
    fail(source, vars[*out.time].name,
         "time dimension " + v.dims[*out.time_dim] + " is empty (no time steps)");
}

/// The reader's resolve_units on a description.
void resolve_units(const VariableDescription& v, const std::string& units, DatasetLayout& out,
                   const std::string& source) {
  if (!trim(units).empty()) {
    out.units = trim(units);
    out.units_overridden = true;
  } else {
    out.units = attribute(v, "units");
    if (out.units.empty())
      fail(source, v.name,
           "has no units attribute; give the height units with units= (e.g. units=\"m\")");
  }
  std::string why;
  if (!length_units_to_metres(out.units, out.to_metres_scale, out.to_metres_offset, why))
    fail(source, v.name,
         std::string(out.units_overridden ? "units= \"" : "units \"") + out.units + "\" " +
             (why == "not a length" ? "are not a length" : why) +
             "; give the height units with units= (e.g. units=\"m\")");
}

}  // namespace

DatasetLayout describe_dataset(const std::vector<VariableDescription>& vars,
                               const std::string& variable, const std::string& units,
                               const std::string& source, const std::string& given_because) {
  DatasetLayout out;
  out.height = choose_height(vars, variable, source);
  const VariableDescription& v = vars[out.height];
  if (!variable.empty())
    out.chosen_because = given_because.empty() ? "variable=" : given_because;
  else
    out.chosen_because = "standard_name " + attribute(v, "standard_name");
  if (!v.numeric) fail(source, v.name, "is not numeric");
  if (v.shape.size() != v.dims.size())
    throw std::invalid_argument("describe_dataset: shape and dims of " + v.name + " differ");
  resolve_kind(v, out);
  resolve_layout(vars, out, source);
  resolve_units(v, units, out, source);
  return out;
}

// ---- values -----------------------------------------------------------------------------------

Unpacking unpacking_from_attributes(chunkio::ElementType storage,
                                    const std::vector<NumberAttribute>& attrs, bool unsigned_data,
                                    double to_metres_scale, double to_metres_offset,
                                    const std::string& source, const std::string& variable) {
  using E = chunkio::ElementType;
  Unpacking u;
  u.to_metres_scale = to_metres_scale;
  u.to_metres_offset = to_metres_offset;
  u.unsigned_data = unsigned_data && is_signed_integer(storage);
  const double wrap =
      u.unsigned_data ? std::ldexp(1.0, static_cast<int>(8 * chunkio::element_size(storage))) : 0;
  const auto find = [&](const char* name) -> const NumberAttribute* {
    for (const auto& a : attrs)
      if (a.name == name && !a.values.empty()) return &a;
    return nullptr;
  };
  // Attribute values of the storage type follow the data's reinterpretation;
  // float storage compares at float precision (reader.cpp resolve_packing).
  const auto to_raw = [&](double v, E att_type) {
    if (u.unsigned_data && att_type == storage && v < 0) v += wrap;
    if (storage == E::f32 && std::isfinite(v) && std::fabs(v) <= std::numeric_limits<float>::max())
      v = static_cast<double>(static_cast<float>(v));
    return v;
  };
  if (const auto* a = find("scale_factor")) u.scale_factor = a->values[0];
  if (const auto* a = find("add_offset")) u.add_offset = a->values[0];
  if (!std::isfinite(u.scale_factor) || !std::isfinite(u.add_offset) || u.scale_factor == 0.0)
    fail(source, variable, "scale_factor/add_offset are not finite and non-zero");

  if (const auto* a = find("_FillValue")) {
    u.fill_value = to_raw(a->values[0], a->type);
  } else {
    // netCDF default fill of the type [3]; none for byte types.
    switch (storage) {
      case E::i16: u.fill_value = NC_FILL_SHORT; break;
      case E::u16: u.fill_value = NC_FILL_USHORT; break;
      case E::i32: u.fill_value = NC_FILL_INT; break;
      case E::u32: u.fill_value = NC_FILL_UINT; break;
      case E::i64: u.fill_value = static_cast<double>(NC_FILL_INT64); break;
      case E::u64: u.fill_value = static_cast<double>(NC_FILL_UINT64); break;
      case E::f32: u.fill_value = static_cast<double>(NC_FILL_FLOAT); break;
      case E::f64: u.fill_value = NC_FILL_DOUBLE; break;
      default: break;
    }
    if (u.fill_value && u.unsigned_data && *u.fill_value < 0) *u.fill_value += wrap;
  }
  if (const auto* a = find("missing_value"))
    for (double v : a->values) u.missing_values.push_back(to_raw(v, a->type));
  if (const auto* a = find("valid_range")) {
    if (a->values.size() != 2) fail(source, variable, "attribute valid_range does not have two values");
    u.valid_min = to_raw(a->values[0], a->type);
    u.valid_max = to_raw(a->values[1], a->type);
  } else {
    if (const auto* b = find("valid_min")) u.valid_min = to_raw(b->values[0], b->type);
    if (const auto* b = find("valid_max")) u.valid_max = to_raw(b->values[0], b->type);
  }
  if (u.valid_min && u.valid_max && *u.valid_min > *u.valid_max)
    fail(source, variable, "valid minimum exceeds valid maximum");
  return u;
}

Grid make_memory_grid(std::vector<double> lat_deg, std::vector<double> lon_deg,
                      const std::string& source, const std::string& variable) {
  try {
    return Grid(std::move(lat_deg), std::move(lon_deg));
  } catch (const std::invalid_argument& e) {
    fail(source, variable, e.what());
  }
}

CurrentsSummary compute_currents(const HeightArray& heights, const Unpacking& unpacking,
                                 const Grid& grid, const CurrentsOptions& options,
                                 const CurrentsArrays& out, int threads,
                                 const std::string& source, const std::string& variable) {
  validate(options);
  if (threads < 0) throw UsageError("--threads: must be >= 0");
  const std::size_t nt = heights.nt, ny = grid.ny(), nx = grid.nx();
  if (heights.ny != ny || heights.nx != nx)
    fail(source, variable,
         "heights have " + std::to_string(heights.ny) + " x " + std::to_string(heights.nx) +
             " cells per map, the coordinates " + std::to_string(ny) + " latitudes x " +
             std::to_string(nx) + " longitudes");
  if (nt == 0) fail(source, variable, "no time steps");
  if (heights.data == nullptr) throw std::invalid_argument("compute_currents: no height data");
  if (out.data.size() != out.fields.size())
    throw std::invalid_argument("compute_currents: one output array per field needed");
  std::vector<Source> sources;
  for (std::size_t k = 0; k < out.fields.size(); ++k) {
    sources.push_back(source_of(out.fields[k]));
    if (out.data[k] == nullptr) throw std::invalid_argument("compute_currents: null output array");
  }

  const ThreadCount thread_count(threads);
  const GeostrophicKernel kernel(grid, options);
  const KinematicsKernel kinematics(grid, options.order, options.coast, options.earth);
  const std::size_t hv = kernel.halo_rows(), hd = kinematics.halo_rows();
  const std::vector<Band> bands = plan_bands(ny, std::min(ny, band_rows(nx)));
  const ElementReader read = reader_of(heights.type);
  const Unpacker unpack(unpacking, heights.type);
  const auto* base = static_cast<const unsigned char*>(heights.data);
  const auto* mask = static_cast<const unsigned char*>(heights.mask);
  const std::size_t map = ny * nx;

  Field eta, u, v;
  std::vector<std::uint8_t> kflags, flags;
  Kinematics kin;
  CurrentsSummary sum;
  sum.steps = nt;
  sum.cells = nt * map;
  sum.band_rows = bands.empty() ? 0 : bands.front().n;
  sum.read_path = sum.write_path = "memory";
  for (std::size_t t = 0; t < nt; ++t) {
    std::size_t valid_heights = 0;
    for (const Band& b : bands) {
      const std::size_t v0 = b.j0 >= hd ? b.j0 - hd : 0, v1 = std::min(ny, b.j0 + b.n + hd);
      const std::size_t e0 = v0 >= hv ? v0 - hv : 0, e1 = std::min(ny, v1 + hv);

      // Heights of rows [e0, e1): stored values -> metres, NaN missing.
      eta = Field(e1 - e0, nx);
      const auto rows = static_cast<long>(e1 - e0);
#pragma omp parallel for schedule(static) reduction(+ : valid_heights)
      for (long r = 0; r < rows; ++r) {
        const std::size_t j = e0 + static_cast<std::size_t>(r);
        const std::ptrdiff_t at = static_cast<std::ptrdiff_t>(t) * heights.strides[0] +
                                  static_cast<std::ptrdiff_t>(j) * heights.strides[1];
        const std::ptrdiff_t mat = static_cast<std::ptrdiff_t>(t) * heights.mask_strides[0] +
                                   static_cast<std::ptrdiff_t>(j) * heights.mask_strides[1];
        double* dst = eta.row(static_cast<std::size_t>(r));
        for (std::size_t i = 0; i < nx; ++i) {
          const auto di = static_cast<std::ptrdiff_t>(i);
          const bool masked = mask != nullptr && mask[mat + di * heights.mask_strides[2]] != 0;
          dst[i] = masked ? nan : unpack(read(base + at + di * heights.strides[2]));
        }
        if (j >= b.j0 && j < b.j0 + b.n)
          for (std::size_t i = 0; i < nx; ++i) valid_heights += !std::isnan(dst[i]);
      }

      // u, v and kernel flags of rows [v0, v1); diagnostics of the band's own rows.
      kernel.compute(eta, e0, v0, v1 - v0, u, v, kflags);
      const auto from = kflags.begin() + static_cast<std::ptrdiff_t>((b.j0 - v0) * nx);
      flags.assign(from, from + static_cast<std::ptrdiff_t>(b.n * nx));
      kinematics.compute(u, v, v0, b.j0, b.n, kin, flags);
      for (std::uint8_t f : flags) {
        sum.flagged += f != 0;
        sum.valid += (f & quality::masked_any) == 0;
      }

      // Rows of every output: as the file reads back (float32), or doubles.
      const auto nrows = static_cast<long>(b.n);
#pragma omp parallel for schedule(static)
      for (long r = 0; r < nrows; ++r) {
        const auto k = static_cast<std::size_t>(r);
        const std::size_t j = b.j0 + k, at = t * map + j * nx;
        for (std::size_t var = 0; var < sources.size(); ++var) {
          const double* src = nullptr;
          switch (sources[var]) {
            case Source::quality: {
              auto* dst = static_cast<std::int8_t*>(out.data[var]) + at;
              for (std::size_t i = 0; i < nx; ++i)
                dst[i] = static_cast<std::int8_t>(flags[k * nx + i]);  // bits 1..64
              continue;
            }
            case Source::u: src = u.row(j - v0); break;
            case Source::v: src = v.row(j - v0); break;
            case Source::speed: src = kin.speed.row(k); break;
            case Source::vorticity: src = kin.vorticity.row(k); break;
            case Source::strain_normal: src = kin.strain_normal.row(k); break;
            case Source::strain_shear: src = kin.strain_shear.row(k); break;
            case Source::strain: src = kin.strain.row(k); break;
            case Source::okubo_weiss: src = kin.okubo_weiss.row(k); break;
          }
          if (out.float64) {
            std::copy(src, src + nx, static_cast<double*>(out.data[var]) + at);
          } else {
            float* dst = static_cast<float*>(out.data[var]) + at;
            for (std::size_t i = 0; i < nx; ++i) dst[i] = as_read_back(src[i]);
          }
        }
      }
    }
    if (valid_heights == 0)
      fail(source, variable,
           "every cell is missing (NaN, masked or fill) at time step " + std::to_string(t));
  }
  return sum;
}

}  // namespace seatilt
