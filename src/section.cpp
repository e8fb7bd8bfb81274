// section.cpp — transport across a polyline (see section.hpp).
//
// Notation: lat/lon in degrees (_deg), s distance along the section (m),
// eta height (m), f Coriolis parameter (s-1), g gravity (m s-2), T transport
// per unit depth (m2 s-1). A section of n segments has n + 1 samples;
// segment k joins samples k and k + 1. Rows j and columns i index the input
// grid in file order; un[] is the longitude axis unwrapped to increasing
// degrees (as Grid does it).
#include "seatilt/section.hpp"

#include <fcntl.h>
#include <geodesic.h>
#include <netcdf.h>
#include <sys/stat.h>
#include <toml++/toml.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <ctime>
#include <fstream>
#include <limits>
#include <optional>
#include <random>
#include <set>
#include <sstream>
#include <stdexcept>
#include <utility>

#include "seatilt/error.hpp"
#include "seatilt/writer.hpp"
#include "seatilt/product.hpp"

namespace seatilt {

namespace {

constexpr double pi = 3.14159265358979323846;
constexpr double deg = pi / 180.0;
constexpr double nan = std::numeric_limits<double>::quiet_NaN();

// ---- text helpers -----------------------------------------------------------

/// TEXT cut to 60 characters, control and non-ASCII bytes as '?', for one-line messages.
std::string shown(const std::string& text) {
  std::string o;
  for (unsigned char c : text) {
    if (o.size() >= 60) {
      o += "...";
      break;
    }
    o += (c >= 0x20 && c < 0x7f) ? static_cast<char>(c) : '?';
  }
  return o;
}

bool is_blank(char c) { return c == ' ' || c == '\t' || c == '\n' || c == '\r'; }

std::string trim(const std::string& s) {
  std::size_t a = 0, b = s.size();
  while (a < b && is_blank(s[a])) ++a;
  while (b > a && is_blank(s[b - 1])) --b;
  return s.substr(a, b - a);
}

std::string num(double x, int digits = 10) {
  if (std::isnan(x)) return "NaN";
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.*g", digits, x);
  return buf;
}

/// Parses one plain decimal number; false for anything else (nan, inf, hex, junk).
bool parse_number(const std::string& token, double& out) {
  if (token.empty() || token.size() > 64) return false;
  for (char c : token)
    if (!((c >= '0' && c <= '9') || c == '+' || c == '-' || c == '.' || c == 'e' || c == 'E'))
      return false;
  errno = 0;
  char* end = nullptr;
  const double v = std::strtod(token.c_str(), &end);
  if (end != token.c_str() + token.size() || !std::isfinite(v)) return false;
  out = v;
  return true;
}

std::string now_iso() {
  std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

// ---- geodesics (Karney 2013 via PROJ geodesic.h) ------------------------------

geod_geodesic make_geodesic(EarthModel model) {
  geod_geodesic g{};
  if (model == EarthModel::sphere)
    geod_init(&g, earth::mean_radius, 0.0);  // sphere of radius R1 (Moritz 2000)
  else
    geod_init(&g, earth::wgs84_a, earth::wgs84_f);  // WGS84 (NIMA TR8350.2)
  return g;
}

double gravity_at(const SectionOptions& o, double lat_deg) {
  switch (o.gravity) {
    case GravityModel::standard:
      return earth::standard_gravity;
    case GravityModel::wgs84:
      return normal_gravity(lat_deg);
    case GravityModel::constant:
      return o.gravity_value;
  }
  return earth::standard_gravity;
}

// ---- atomic output ----------------------------------------------------------

std::pair<std::string, std::string> split_path(const std::string& path) {
  const auto slash = path.rfind('/');
  if (slash == std::string::npos) return {".", path};
  return {slash == 0 ? std::string("/") : path.substr(0, slash), path.substr(slash + 1)};
}

std::uint32_t random_bits() {
  try {
    std::random_device rd;
    return static_cast<std::uint32_t>(rd());
  } catch (...) {
    return static_cast<std::uint32_t>(std::chrono::steady_clock::now().time_since_epoch().count());
  }
}


/// Checks that PATH can be created: its folder exists and is writable, PATH
/// is not a folder and (without FORCE) does not exist. Throws OutputError.
void check_output_target(const std::string& path, bool force) {
  const auto [folder, name] = split_path(path);
  auto fail = [&](const std::string& problem) { throw OutputError(path + ": " + problem); };
  if (name.empty() || name == "." || name == "..") fail("output is not a file name");
  struct stat st {};
  if (::stat(folder.c_str(), &st) != 0)
    fail("output folder " + folder + ": " + std::strerror(errno));
  if (!S_ISDIR(st.st_mode)) fail("output folder " + folder + ": " + std::strerror(ENOTDIR));
  if (::access(folder.c_str(), W_OK | X_OK) != 0)
    fail("output folder " + folder + ": " + std::strerror(errno));
  if (::lstat(path.c_str(), &st) == 0) {
    struct stat target {};
    if (::stat(path.c_str(), &target) == 0 && S_ISDIR(target.st_mode)) fail("output is a folder");
    if (!force) fail("output exists (use --force to overwrite)");
  } else if (errno != ENOENT) {
    fail(std::strerror(errno));
  }
}

/// A hidden temporary sibling of the final output; removed unless published.
class PendingOutput {
 public:
  PendingOutput(std::string final_path, bool force)
      : final_(std::move(final_path)), force_(force) {}
  ~PendingOutput() {
    if (!tmp_.empty() && !published_) ::unlink(tmp_.c_str());
  }
  PendingOutput(const PendingOutput&) = delete;
  PendingOutput& operator=(const PendingOutput&) = delete;

  /// A fresh temporary name ".<name>.tmp-<pid>-<random>" beside the output.
  const std::string& next_name() {
    const auto slash = final_.rfind('/');
    const std::string prefix = slash == std::string::npos ? "" : final_.substr(0, slash + 1);
    const std::string name = final_.substr(slash == std::string::npos ? 0 : slash + 1);
    char tag[32];
    std::snprintf(tag, sizeof tag, "%ld-%08x", static_cast<long>(::getpid()),
                  static_cast<unsigned>(random_bits()));
    candidate_ = prefix + "." + name + ".tmp-" + tag;
    return candidate_;
  }
  /// Records that next_name() was created by us.
  void created() { tmp_ = candidate_; }
  [[nodiscard]] const std::string& tmp() const { return tmp_; }
  [[nodiscard]] const std::string& path() const { return final_; }

  /// fsyncs the closed temporary and renames it to the final path.
  void publish() {
    if (const int err = sync_path(tmp_, false); err != 0)
      throw OutputError(final_ + ": flushing to disk: " + std::strerror(err));
    const int err = force_ ? (std::rename(tmp_.c_str(), final_.c_str()) == 0 ? 0 : errno)
                           : rename_noreplace(tmp_, final_);
    if (err != 0)
      throw OutputError(final_ + ": " +
                        (err == EEXIST ? std::string("output exists (use --force to overwrite)")
                                       : "renaming " + tmp_ + ": " + std::strerror(err)));
    published_ = true;
    sync_path(split_path(final_).first, true);  // durable rename; the file is complete anyway
  }

 private:
  std::string final_, tmp_, candidate_;
  bool force_ = false;
  bool published_ = false;
};

// ---- the run's data -----------------------------------------------------------

/// One time step of one input with a result per section.
struct Step {
  std::string iso;          // "" without time
  double time_value = 0.0;  // raw CF value
  std::size_t input = 0;
  std::vector<SectionResult> results;
};

/// Time metadata of the inputs (netCDF output).
struct TimeMeta {
  bool present = false;
  std::string units, calendar;
};

std::string attr_text(const std::vector<Attribute>& attrs, const std::string& name) {
  for (const Attribute& a : attrs)
    if (a.name == name && !a.text.empty()) return a.text;
  return {};
}

enum class OutputFormat { csv, netcdf };

OutputFormat output_format(const std::string& path) {
  auto ends = [&](const char* ext) {
    const std::size_t n = std::strlen(ext);
    if (path.size() <= n) return false;
    for (std::size_t k = 0; k < n; ++k)
      if (std::tolower(static_cast<unsigned char>(path[path.size() - n + k])) != ext[k])
        return false;
    return true;
  };
  if (ends(".csv")) return OutputFormat::csv;
  if (ends(".nc") || ends(".nc4")) return OutputFormat::netcdf;
  throw UsageError("-o: '" + shown(path) + "' must end in .csv or .nc");
}

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\n\r") == std::string::npos && trim(s) == s) return s;
  std::string q = "\"";
  for (char c : s) q += c == '"' ? std::string("\"\"") : std::string(1, c);
  return q + "\"";
}

// ---- CSV ----------------------------------------------------------------------

void write_csv(const SectionJob& job, const std::vector<Step>& steps) {
  PendingOutput out(job.output, job.force);
  int fd = -1;
  for (int attempt = 0; attempt < 4 && fd < 0; ++attempt) {
    fd = ::open(out.next_name().c_str(), O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
    if (fd < 0 && errno != EEXIST) break;
  }
  if (fd < 0)
    throw OutputError(job.output + ": cannot create temporary file: " + std::strerror(errno));
  out.created();
  FILE* f = ::fdopen(fd, "w");
  if (!f) {
    ::close(fd);
    throw OutputError(job.output + ": " + std::strerror(errno));
  }
  const bool depth = job.options.depth_m > 0;
  std::string text =
      "time,section,length_m,transport_per_depth_m2s,mean_normal_velocity_ms,excluded_fraction";
  if (depth) text += ",transport_m3s,transport_sv";
  text += "\n";
  for (const Step& st : steps)
    for (std::size_t k = 0; k < st.results.size(); ++k) {
      const SectionResult& r = st.results[k];
      text += csv_field(st.iso) + "," + csv_field(job.sections[k].name) + "," +
              num(r.length_m, 12) + "," + num(r.transport_per_depth_m2s) + "," +
              num(r.mean_normal_velocity_ms) + "," + num(r.excluded_fraction);
      if (depth) {
        const double q = r.transport_per_depth_m2s * job.options.depth_m;  // m3 s-1 = T H
        text += "," + num(q) + "," + num(q / 1e6);                         // 1 Sv = 1e6 m3 s-1
      }
      text += "\n";
    }
  const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size() && std::fflush(f) == 0;
  const int err = errno;
  if (std::fclose(f) != 0 || !ok)
    throw OutputError(job.output + ": writing: " + std::strerror(ok ? errno : err));
  out.publish();
}

// ---- netCDF (CF DSG timeSeries, orthogonal multidimensional representation) --

class NcOut {
 public:
  NcOut(PendingOutput& out) : out_(out) {}
  ~NcOut() {
    if (open_) nc_close(ncid_);
  }
  NcOut(const NcOut&) = delete;
  NcOut& operator=(const NcOut&) = delete;

  void create() {
    int status = NC_NOERR;
    for (int attempt = 0; attempt < 4; ++attempt) {
      status = nc_create(out_.next_name().c_str(), NC_NETCDF4 | NC_NOCLOBBER, &ncid_);
      if (status == NC_NOERR) {
        open_ = true;
        out_.created();
        return;
      }
      if (status != NC_EEXIST && status != EEXIST) break;
    }
    throw OutputError(out_.path() + ": cannot create temporary file: " + nc_strerror(status));
  }
  void check(int status, const std::string& var, const std::string& action) const {
    if (status != NC_NOERR)
      throw OutputError(
          input_message(out_.path(), var, std::string(nc_strerror(status)) + " (" + action + ")"));
  }
  int dim(const char* name, std::size_t n) {
    int id = -1;
    check(nc_def_dim(ncid_, name, n, &id), "", std::string("defining dimension ") + name);
    return id;
  }
  int var(const std::string& name, nc_type type, std::vector<int> dims) {
    int id = -1;
    check(nc_def_var(ncid_, name.c_str(), type, static_cast<int>(dims.size()), dims.data(), &id),
          name, "defining variable");
    return id;
  }
  void text(int varid, const std::string& name, const std::string& value) {
    check(nc_put_att_text(ncid_, varid, name.c_str(), value.size(), value.c_str()),
          varid == NC_GLOBAL ? "" : var_name(varid), "writing attribute " + name);
  }
  void number(int varid, const std::string& name, nc_type type, double value) {
    check(nc_put_att_double(ncid_, varid, name.c_str(), type, 1, &value),
          varid == NC_GLOBAL ? "" : var_name(varid), "writing attribute " + name);
  }
  std::string var_name(int varid) const {
    char buf[NC_MAX_NAME + 1] = {0};
    nc_inq_varname(ncid_, varid, buf);
    return buf;
  }
  [[nodiscard]] int id() const { return ncid_; }
  void close() {
    open_ = false;
    check(nc_close(ncid_), "", "closing");
  }

 private:
  PendingOutput& out_;
  int ncid_ = -1;
  bool open_ = false;
};

void write_netcdf(const SectionJob& job, const std::vector<Step>& steps,
                  const std::vector<SectionPath>& paths, const std::vector<double>& spacings,
                  const TimeMeta& tm, const HeightInfo& first_input) {
  PendingOutput out(job.output, job.force);
  NcOut nc(out);
  nc.create();
  const std::size_t ns = job.sections.size(), nt = steps.size();
  std::size_t nv = 0;
  for (const SectionLine& l : job.sections) nv = std::max(nv, l.points.size());
  const bool depth = job.options.depth_m > 0;

  const int d_sec = nc.dim("section", ns);
  const int d_time = nc.dim("time", nt);
  const int d_vert = nc.dim("vertex", nv);

  const int v_time = nc.var("time", NC_DOUBLE, {d_time});
  nc.text(v_time, "standard_name", "time");
  nc.text(v_time, "long_name", "time");
  nc.text(v_time, "units", tm.units);
  nc.text(v_time, "calendar", tm.calendar);
  nc.text(v_time, "axis", "T");

  const int v_name = nc.var("section_name", NC_STRING, {d_sec});
  nc.text(v_name, "long_name", "section name");
  nc.text(v_name, "cf_role", "timeseries_id");

  auto coord = [&](const char* name, bool is_lat, const std::string& long_name,
                   const char* standard_name) {
    const int v = nc.var(name, NC_DOUBLE, {d_sec});
    if (standard_name) nc.text(v, "standard_name", standard_name);
    nc.text(v, "long_name", long_name);
    nc.text(v, "units", is_lat ? "degrees_north" : "degrees_east");
    return v;
  };
  const int v_lat =
      coord("lat", true, "latitude of the section's midpoint along its length", "latitude");
  const int v_lon =
      coord("lon", false, "longitude of the section's midpoint along its length", "longitude");
  const int v_lat0 = coord("lat_start", true, "latitude of the section's first point", nullptr);
  const int v_lon0 = coord("lon_start", false, "longitude of the section's first point", nullptr);
  const int v_lat1 = coord("lat_end", true, "latitude of the section's last point", nullptr);
  const int v_lon1 = coord("lon_end", false, "longitude of the section's last point", nullptr);

  const int v_len = nc.var("section_length", NC_DOUBLE, {d_sec});
  nc.text(v_len, "long_name", "length of the section along geodesics");
  nc.text(v_len, "units", "m");
  const int v_sp = nc.var("sample_spacing", NC_DOUBLE, {d_sec});
  nc.text(v_sp, "long_name", "distance between samples along the section (at most)");
  nc.text(v_sp, "units", "m");
  const int v_nv = nc.var("vertex_count", NC_INT, {d_sec});
  nc.text(v_nv, "long_name", "number of vertices of the section line");
  nc.text(v_nv, "units", "1");
  auto vertex_var = [&](const char* name, bool is_lat) {
    const int v = nc.var(name, NC_DOUBLE, {d_sec, d_vert});
    const double fill = NC_FILL_DOUBLE;
    nc.check(nc_def_var_fill(nc.id(), v, 0, &fill), name, "setting _FillValue");
    nc.text(v, "long_name",
            std::string(is_lat ? "latitude" : "longitude") +
                " of the section line's vertices, joined by geodesics");
    nc.text(v, "units", is_lat ? "degrees_north" : "degrees_east");
    return v;
  };
  const int v_vlon = vertex_var("vertex_lon", false);
  const int v_vlat = vertex_var("vertex_lat", true);

  const std::string sign =
      "positive to the left when walking from the first point of the "
      "section to the last";
  auto data_var = [&](const char* name, const char* units, const std::string& long_name,
                      const char* standard_name, const std::string& comment) {
    const int v = nc.var(name, NC_FLOAT, {d_sec, d_time});
    const float fill = NC_FILL_FLOAT;
    nc.check(nc_def_var_fill(nc.id(), v, 0, &fill), name, "setting _FillValue");
    if (standard_name) nc.text(v, "standard_name", standard_name);
    nc.text(v, "long_name", long_name);
    nc.text(v, "units", units);
    nc.text(v, "coordinates", "lat lon section_name");
    nc.text(v, "coverage_content_type", "modelResult");
    if (!comment.empty()) nc.text(v, "comment", comment);
    return v;
  };
  std::vector<int> v_data;
  v_data.push_back(data_var("transport_per_depth", "m2 s-1",
                            "geostrophic surface transport per unit depth across the section",
                            nullptr,
                            "integral of the normal surface geostrophic velocity along "
                            "the section, " +
                                sign));
  v_data.push_back(data_var(
      "mean_normal_velocity", "m s-1", "mean surface geostrophic velocity normal to the section",
      nullptr, "transport_per_depth divided by the length of the usable segments, " + sign));
  v_data.push_back(data_var("excluded_fraction", "1",
                            "fraction of the section length excluded (missing height, outside "
                            "the grid or equatorial band)",
                            nullptr, ""));
  if (depth) {
    v_data.push_back(data_var("volume_transport", "m3 s-1",
                              "volume transport across the section (equivalent barotropic)",
                              "ocean_volume_transport_across_line",
                              std::string(section_transport_caution()) + " Sign: " + sign + "."));
    v_data.push_back(data_var("volume_transport_sv", "sverdrup",
                              "volume transport across the section in sverdrups (equivalent "
                              "barotropic)",
                              "ocean_volume_transport_across_line",
                              std::string(section_transport_caution()) + " Sign: " + sign + "."));
  }

  // Global attributes: CF-1.12 + ACDD-1.3 (REFERENCES.md section 1).
  const std::string created = now_iso();
  double lat_lo = 90, lat_hi = -90, lon_lo = 360, lon_hi = -360;
  for (const SectionLine& l : job.sections)
    for (const GeoPoint& p : l.points) {
      lat_lo = std::min(lat_lo, p.lat_deg);
      lat_hi = std::max(lat_hi, p.lat_deg);
      lon_lo = std::min(lon_lo, p.lon_deg);
      lon_hi = std::max(lon_hi, p.lon_deg);
    }
  std::string inputs;
  for (const std::string& in : job.inputs) inputs += (inputs.empty() ? "" : ", ") + in;
  auto g = [&](const char* name, const std::string& value) { nc.text(NC_GLOBAL, name, value); };
  g("Conventions", "CF-1.12, ACDD-1.3");
  g("featureType", "timeSeries");
  g("title", "Geostrophic surface transport across sections");
  g("summary",
    "Surface geostrophic velocity normal to each section and its integral along the "
    "section (transport per unit depth)" +
        std::string(depth ? ", and volume transport over a given depth" : "") +
        ", from the sea-surface height variable '" + first_input.variable + "'.");
  g("keywords", "geostrophic currents, sea surface height, section, volume transport");
  g("comment",
    std::string(currents_caution()) + " " + section_transport_caution() + " Sign: " + sign + ".");
  g("history", created + " " + job.command_line);
  g("source", std::string("seatilt ") + SEATILT_VERSION + " from " + inputs);
  g("processing_level", "L4 derived product");
  g("standard_name_vocabulary", "CF Standard Name Table v83");
  g("date_created", created);
  nc.number(NC_GLOBAL, "geospatial_lat_min", NC_DOUBLE, lat_lo);
  nc.number(NC_GLOBAL, "geospatial_lat_max", NC_DOUBLE, lat_hi);
  g("geospatial_lat_units", "degrees_north");
  nc.number(NC_GLOBAL, "geospatial_lon_min", NC_DOUBLE, lon_lo);
  nc.number(NC_GLOBAL, "geospatial_lon_max", NC_DOUBLE, lon_hi);
  g("geospatial_lon_units", "degrees_east");
  if (!steps.empty()) {
    g("time_coverage_start", steps.front().iso);
    g("time_coverage_end", steps.back().iso);
  }
  g("references",
    "Karney (2013) J. Geodesy 87, 43-55 (geodesics); Stewart, Introduction to Physical "
    "Oceanography ch. 10 (geostrophic balance); NIMA TR8350.2 (WGS84)");
  g("section_method",
    "v_normal = (g/f) d(eta)/ds along geodesics; transport per unit depth = "
    "sum of (g/f) d(eta) over segments with f, g at segment midpoints");
  g("section_sign_convention", sign);
  g("section_spacing", job.options.spacing_m > 0
                           ? num(job.options.spacing_m) + " m (--spacing)"
                           : std::string("about the grid spacing (variable sample_spacing)"));
  if (depth) nc.number(NC_GLOBAL, "section_depth_m", NC_DOUBLE, job.options.depth_m);
  nc.number(NC_GLOBAL, "geostrophy_equator_band_deg", NC_DOUBLE, job.options.equator_band_deg);
  g("geostrophy_earth_model", job.options.earth == EarthModel::sphere ? "sphere" : "wgs84");
  std::string gravity = "standard 9.80665 m s-2";
  if (job.options.gravity == GravityModel::wgs84) gravity = "wgs84 normal gravity at latitude";
  if (job.options.gravity == GravityModel::constant)
    gravity = num(job.options.gravity_value) + " m s-2";
  g("geostrophy_gravity", gravity);
  g("input_files", inputs);
  g("input_height_variable", first_input.variable);
  g("input_height_kind", first_input.kind == HeightKind::anomaly ? "anomaly" : "absolute");
  nc.check(nc_enddef(nc.id()), "", "ending define mode");

  // Data.
  std::vector<double> tv(nt);
  for (std::size_t t = 0; t < nt; ++t) tv[t] = steps[t].time_value;
  if (nt) nc.check(nc_put_var_double(nc.id(), v_time, tv.data()), "time", "writing");
  std::vector<const char*> names(ns);
  for (std::size_t k = 0; k < ns; ++k) names[k] = job.sections[k].name.c_str();
  nc.check(nc_put_var_string(nc.id(), v_name, names.data()), "section_name", "writing");
  std::vector<double> lat(ns), lon(ns), lat0(ns), lon0(ns), lat1(ns), lon1(ns), len(ns);
  std::vector<int> count(ns);
  std::vector<double> vlon(ns * nv, NC_FILL_DOUBLE), vlat(ns * nv, NC_FILL_DOUBLE);
  for (std::size_t k = 0; k < ns; ++k) {
    const SectionLine& l = job.sections[k];
    lat[k] = paths[k].midpoint.lat_deg;
    lon[k] = paths[k].midpoint.lon_deg;
    lat0[k] = l.points.front().lat_deg;
    lon0[k] = l.points.front().lon_deg;
    lat1[k] = l.points.back().lat_deg;
    lon1[k] = l.points.back().lon_deg;
    len[k] = paths[k].length_m;
    count[k] = static_cast<int>(l.points.size());
    for (std::size_t p = 0; p < l.points.size(); ++p) {
      vlon[k * nv + p] = l.points[p].lon_deg;
      vlat[k * nv + p] = l.points[p].lat_deg;
    }
  }
  const std::pair<int, const std::vector<double>*> doubles[] = {
      {v_lat, &lat},   {v_lon, &lon}, {v_lat0, &lat0},   {v_lon0, &lon0}, {v_lat1, &lat1},
      {v_lon1, &lon1}, {v_len, &len}, {v_sp, &spacings}, {v_vlon, &vlon}, {v_vlat, &vlat}};
  for (const auto& [v, data] : doubles)
    nc.check(nc_put_var_double(nc.id(), v, data->data()), nc.var_name(v), "writing");
  nc.check(nc_put_var_int(nc.id(), v_nv, count.data()), "vertex_count", "writing");

  std::vector<float> buf(ns * nt);
  for (std::size_t m = 0; m < v_data.size(); ++m) {
    for (std::size_t k = 0; k < ns; ++k)
      for (std::size_t t = 0; t < nt; ++t) {
        const SectionResult& r = steps[t].results[k];
        double x = nan;
        switch (m) {
          case 0:
            x = r.transport_per_depth_m2s;
            break;
          case 1:
            x = r.mean_normal_velocity_ms;
            break;
          case 2:
            x = r.excluded_fraction;
            break;
          case 3:
            x = r.transport_per_depth_m2s * job.options.depth_m;
            break;  // T H, m3 s-1
          case 4:
            x = r.transport_per_depth_m2s * job.options.depth_m / 1e6;
            break;  // Sv
          default:
            break;
        }
        // Fill, never NaN (REFERENCES.md section 9).
        buf[k * nt + t] =
            std::isfinite(x) && std::fabs(x) < 3.0e38 ? static_cast<float>(x) : NC_FILL_FLOAT;
      }
    if (nt)
      nc.check(nc_put_var_float(nc.id(), v_data[m], buf.data()), nc.var_name(v_data[m]), "writing");
  }
  nc.text(NC_GLOBAL, "seatilt_status", "complete");  // completion marker, written last
  nc.close();
  out.publish();
}

}  // namespace

// ---- public: parsing --------------------------------------------------------

std::vector<GeoPoint> parse_section_line(const std::string& text, const std::string& context) {
  auto fail = [&](const std::string& problem, const std::string& offending) {
    throw UsageError(context + ": " + problem + " in '" + shown(offending) + "'");
  };
  std::vector<GeoPoint> pts;
  if (trim(text).empty()) fail("no points (expected \"LON LAT, LON LAT, ...\")", text);
  std::size_t start = 0;
  while (start <= text.size()) {
    std::size_t comma = text.find(',', start);
    if (comma == std::string::npos) comma = text.size();
    const std::string piece = text.substr(start, comma - start);
    const std::string p = trim(piece);
    const std::string where = "point " + std::to_string(pts.size() + 1);
    if (p.empty()) fail(where + " is empty (stray comma?)", text);
    if (pts.size() >= max_section_vertices)
      fail("more than " + std::to_string(max_section_vertices) + " points", text);
    // Split into blank-separated tokens.
    std::vector<std::string> tokens;
    std::size_t a = 0;
    while (a < p.size() && tokens.size() < 3) {
      while (a < p.size() && is_blank(p[a])) ++a;
      std::size_t b = a;
      while (b < p.size() && !is_blank(p[b])) ++b;
      if (b > a) tokens.push_back(p.substr(a, b - a));
      a = b;
    }
    if (tokens.size() != 2) fail(where + ": expected 'LON LAT' (two numbers)", p);
    GeoPoint g;
    if (!parse_number(tokens[0], g.lon_deg)) fail(where + ": longitude is not a number", p);
    if (!parse_number(tokens[1], g.lat_deg)) fail(where + ": latitude is not a number", p);
    if (!(g.lon_deg >= -360.0 && g.lon_deg <= 360.0))
      fail(where + ": longitude outside [-360, 360]", p);
    if (!(g.lat_deg >= -90.0 && g.lat_deg <= 90.0)) fail(where + ": latitude outside [-90, 90]", p);
    if (!pts.empty() && pts.back().lon_deg == g.lon_deg && pts.back().lat_deg == g.lat_deg)
      fail(where + " repeats the point before it", p);
    pts.push_back(g);
    if (comma == text.size()) break;
    start = comma + 1;
  }
  if (pts.size() < 2) fail("a section needs at least 2 points", text);
  return pts;
}

void check_section_name(const std::string& name, const std::string& context) {
  if (name.empty() || trim(name).empty()) throw UsageError(context + ": empty section name");
  if (name.size() > 100)
    throw UsageError(context + ": section name longer than 100 characters: '" + shown(name) + "'");
  for (unsigned char c : name)
    if (c < 0x20 || c == 0x7f)
      throw UsageError(context + ": control character in section name '" + shown(name) + "'");
}

std::vector<SectionLine> read_section_file(const std::string& path) {
  {
    std::ifstream probe(path);
    if (!probe) throw UsageError(path + ": cannot read section file: " + std::strerror(errno));
    struct stat st {};
    if (::stat(path.c_str(), &st) == 0 && S_ISDIR(st.st_mode))
      throw UsageError(path + ": cannot read section file: " + std::strerror(EISDIR));
  }
  toml::table tbl;
  try {
    tbl = toml::parse_file(path);
  } catch (const toml::parse_error& e) {
    const auto& b = e.source().begin;
    throw UsageError(path + ":" + std::to_string(b.line) + ":" + std::to_string(b.column) + ": " +
                     shown(std::string(e.description())));
  }
  auto at = [&](const toml::node& n) { return path + ":" + std::to_string(n.source().begin.line); };
  for (auto&& [key, node] : tbl)
    if (key.str() != "section")
      throw UsageError(at(node) + ": unknown key '" + shown(std::string(key.str())) +
                       "' (expected [[section]] tables)");
  const toml::array* arr = tbl["section"].as_array();
  if (tbl.contains("section") && !arr)
    throw UsageError(at(*tbl.get("section")) + ": 'section' must be [[section]] tables");
  if (!arr || arr->empty())
    throw UsageError(path +
                     ": no [[section]] table (each needs name = \"...\" and line = "
                     "\"LON LAT, LON LAT, ...\")");
  std::vector<SectionLine> out;
  std::set<std::string> seen;
  for (const toml::node& n : *arr) {
    const toml::table* t = n.as_table();
    if (!t) throw UsageError(at(n) + ": 'section' must be [[section]] tables");
    for (auto&& [key, v] : *t)
      if (key.str() != "name" && key.str() != "line")
        throw UsageError(at(v) + ": unknown key '" + shown(std::string(key.str())) +
                         "' in [[section]] (expected name, line)");
    const auto name = (*t)["name"].value<std::string>();
    const auto line = (*t)["line"].value<std::string>();
    if (!name) throw UsageError(at(n) + ": [[section]] needs name = \"...\" (a string)");
    if (!line) throw UsageError(at(n) + ": [[section]] needs line = \"LON LAT, ...\" (a string)");
    check_section_name(*name, at(n));
    if (!seen.insert(*name).second)
      throw UsageError(at(n) + ": section name '" + shown(*name) + "' used twice");
    SectionLine s;
    s.name = *name;
    s.points = parse_section_line(*line, at(n) + ": section '" + shown(*name) + "'");
    out.push_back(std::move(s));
  }
  return out;
}

void validate(const SectionOptions& o) {
  if (!(std::isfinite(o.spacing_m) && o.spacing_m >= 0.0 && o.spacing_m <= 1e7))
    throw UsageError("--spacing: " + num(o.spacing_m / 1e3) + " km is outside (0, 10000]");
  if (!(std::isfinite(o.depth_m) && o.depth_m >= 0.0 && o.depth_m <= 12000.0))
    throw UsageError("--depth: " + num(o.depth_m) + " m is outside (0, 12000]");
  if (!(o.equator_band_deg >= 0.0 && o.equator_band_deg <= 30.0))
    throw UsageError("--equator-band: " + num(o.equator_band_deg) + " is outside 0..30 degrees");
  if (o.gravity == GravityModel::constant && !(o.gravity_value >= 0.1 && o.gravity_value <= 100.0))
    throw UsageError("--gravity: " + num(o.gravity_value) + " m s-2 is outside 0.1..100");
}

const char* section_transport_caution() {
  return "Volume transport = transport per unit depth x depth assumes that the surface "
         "geostrophic velocity holds unchanged over the whole depth (equivalent-barotropic "
         "assumption). Real currents are mostly baroclinic and weaken with depth, and the "
         "Ekman and ageostrophic parts are absent, so this is a rough scale of the transport, "
         "not a measured transport.";
}

// ---- public: geometry and integration ------------------------------------------

SectionPath sample_geodesic_path(const std::vector<GeoPoint>& points, EarthModel model,
                                 double spacing_m, const std::string& context) {
  if (points.size() < 2) throw UsageError(context + ": a section needs at least 2 points");
  if (!(spacing_m > 0.0) || !std::isfinite(spacing_m))
    throw UsageError(context + ": sample spacing must be > 0");
  const geod_geodesic g = make_geodesic(model);
  constexpr unsigned caps = GEOD_LATITUDE | GEOD_LONGITUDE | GEOD_DISTANCE_IN;
  SectionPath p;
  auto push_sample = [&](double lat, double lon, double s) {
    p.lat_deg.push_back(lat);
    p.lon_deg.push_back(std::remainder(lon, 360.0));
    p.s_m.push_back(s);
  };
  std::vector<geod_geodesicline> legs(points.size() - 1);
  std::vector<double> leg_start(points.size() - 1);
  push_sample(points[0].lat_deg, points[0].lon_deg, 0.0);
  std::size_t total = 1;
  double s0 = 0.0;
  for (std::size_t k = 0; k + 1 < points.size(); ++k) {
    const GeoPoint& a = points[k];
    const GeoPoint& b = points[k + 1];
    geod_geodesicline& line = legs[k];
    geod_inverseline(&line, &g, a.lat_deg, a.lon_deg, b.lat_deg, b.lon_deg, caps);
    const double len = line.s13;  // m, geodesic distance [1]
    if (!(len > 1e-3))
      throw UsageError(context + ": points " + std::to_string(k + 1) + " and " +
                       std::to_string(k + 2) + " are the same place");
    const double ratio = std::ceil(len / spacing_m);
    if (!(ratio <= static_cast<double>(max_section_samples - total)))
      throw UsageError(context + ": more than " + std::to_string(max_section_samples) +
                       " samples at a spacing of " + num(spacing_m / 1e3) +
                       " km; use a larger --spacing");
    const auto n = static_cast<std::size_t>(std::max(1.0, ratio));
    total += n;
    leg_start[k] = s0;
    for (std::size_t m = 1; m <= n; ++m) {
      const double s_mid = len * (static_cast<double>(m) - 0.5) / static_cast<double>(n);
      double lat_mid = 0, lon_mid = 0;
      geod_position(&line, s_mid, &lat_mid, &lon_mid, nullptr);
      p.mid_lat_deg.push_back(lat_mid);
      p.seg_length_m.push_back(len / static_cast<double>(n));
      if (m == n) {
        push_sample(b.lat_deg, b.lon_deg, s0 + len);  // the vertex itself, not a recomputed one
      } else {
        const double s = len * static_cast<double>(m) / static_cast<double>(n);
        double lat = 0, lon = 0;
        geod_position(&line, s, &lat, &lon, nullptr);
        push_sample(lat, lon, s0 + s);
      }
    }
    s0 += len;
  }
  p.length_m = s0;
  // Point at half the length (the netCDF station position).
  const double half = 0.5 * s0;
  std::size_t k = 0;
  while (k + 1 < legs.size() && leg_start[k + 1] <= half) ++k;
  double lat = 0, lon = 0;
  geod_position(&legs[k], half - leg_start[k], &lat, &lon, nullptr);
  p.midpoint = GeoPoint{std::remainder(lon, 360.0), lat};
  return p;
}

double section_length_m(const std::vector<GeoPoint>& points, EarthModel model) {
  const geod_geodesic g = make_geodesic(model);
  double total = 0.0;
  for (std::size_t k = 0; k + 1 < points.size(); ++k) {
    double s12 = 0.0;
    geod_inverse(&g, points[k].lat_deg, points[k].lon_deg, points[k + 1].lat_deg,
                 points[k + 1].lon_deg, &s12, nullptr, nullptr);  // m [1]
    total += s12;
  }
  return total;
}

SectionResult integrate_transport(const std::vector<double>& eta,
                                  const std::vector<double>& seg_length_m,
                                  const std::vector<double>& g_over_f) {
  if (eta.size() != seg_length_m.size() + 1 || g_over_f.size() != seg_length_m.size())
    throw std::invalid_argument("integrate_transport: sizes of eta, lengths and g/f disagree");
  SectionResult r;
  double t = 0.0, included = 0.0, excluded = 0.0;
  for (std::size_t k = 0; k < seg_length_m.size(); ++k) {
    const double d_eta = eta[k + 1] - eta[k];  // NaN when either sample is missing
    if (std::isfinite(g_over_f[k]) && std::isfinite(d_eta)) {
      t += g_over_f[k] * d_eta;  // (g/f) d(eta), m2 s-1: v_n = (g/f) d(eta)/ds [2] ch. 10
      included += seg_length_m[k];
    } else {
      excluded += seg_length_m[k];
    }
  }
  r.length_m = included + excluded;
  r.included_length_m = included;
  r.transport_per_depth_m2s = included > 0 ? t : nan;
  r.mean_normal_velocity_ms = included > 0 ? t / included : nan;
  r.excluded_fraction = r.length_m > 0 ? excluded / r.length_m : 1.0;
  return r;
}

// ---- public: sampler -----------------------------------------------------------------

double SectionSampler::default_spacing_m(const Grid& grid, const std::vector<GeoPoint>& points) {
  double mean_abs_lat = 0;
  for (const GeoPoint& p : points) mean_abs_lat += std::fabs(p.lat_deg);
  mean_abs_lat /= static_cast<double>(std::max<std::size_t>(points.size(), 1));
  const double dy = grid.dlat_deg() * deg * earth::mean_radius;
  const double dx = grid.dlon_deg() * deg * earth::mean_radius * std::cos(mean_abs_lat * deg);
  return std::min(dy, std::max(dx, 0.25 * dy));
}

SectionSampler::SectionSampler(const Grid& grid, const SectionLine& line,
                               const SectionOptions& options)
    : line_(line) {
  validate(options);
  spacing_m_ = options.spacing_m;
  if (!(spacing_m_ > 0))
    spacing_m_ = std::max(default_spacing_m(grid, line.points),
                          section_length_m(line.points, options.earth) /
                              static_cast<double>(max_section_samples / 2));
  const std::string context = "section '" + shown(line.name) + "'";
  path_ = sample_geodesic_path(line.points, options.earth, spacing_m_, context);

  // Latitude axis in ascending order; row(k) maps back to the file's row.
  const std::size_t ny = grid.ny(), nx = grid.nx();
  const bool desc = grid.lat_descending();
  std::vector<double> asc(grid.lat_deg());
  if (desc) std::reverse(asc.begin(), asc.end());
  auto row = [&](std::size_t k) { return desc ? ny - 1 - k : k; };
  // Longitudes unwrapped to increasing degrees, as Grid does it.
  const std::vector<double>& lon = grid.lon_deg();
  std::vector<double> un(nx);
  un[0] = lon[0];
  for (std::size_t i = 1; i < nx; ++i) {
    double d = std::fmod(lon[i] - lon[i - 1], 360.0);
    if (d <= 0.0) d += 360.0;
    un[i] = un[i - 1] + d;
  }
  constexpr double edge_tol = 1e-9;  // degrees: rounding of geodesic positions at a grid edge

  auto locate = [&](double lat, double lon_deg) {
    Stencil st;
    if (!(lat >= asc.front() - edge_tol && lat <= asc.back() + edge_tol)) return st;
    lat = std::clamp(lat, asc.front(), asc.back());
    std::size_t k =
        static_cast<std::size_t>(std::upper_bound(asc.begin(), asc.end(), lat) - asc.begin());
    k = std::clamp<std::size_t>(k, 1, ny - 1) - 1;
    st.ja = row(k);
    st.jb = row(k + 1);
    st.wj = (lat - asc[k]) / (asc[k + 1] - asc[k]);
    double r = std::fmod(lon_deg - un[0], 360.0);
    if (r < 0) r += 360.0;
    if (r >= 360.0) r = 0.0;
    double x = un[0] + r;
    if (x > un.back()) {
      if (grid.periodic()) {
        st.ia = nx - 1;
        st.ib = 0;
        st.wi = (x - un.back()) / (un[0] + 360.0 - un.back());
        st.inside = true;
        return st;
      }
      if (x - un.back() <= edge_tol)
        x = un.back();
      else if (x - 360.0 >= un[0] - edge_tol)
        x = un[0];
      else
        return st;
    }
    std::size_t i =
        static_cast<std::size_t>(std::upper_bound(un.begin(), un.end(), x) - un.begin());
    i = std::clamp<std::size_t>(i, 1, nx - 1) - 1;
    st.ia = i;
    st.ib = i + 1;
    st.wi = (x - un[i]) / (un[i + 1] - un[i]);
    st.inside = true;
    return st;
  };

  for (std::size_t p = 0; p < line.points.size(); ++p) {
    const GeoPoint& v = line.points[p];
    if (!locate(v.lat_deg, v.lon_deg).inside) {
      const double lon_lo = *std::min_element(lon.begin(), lon.end());
      const double lon_hi = *std::max_element(lon.begin(), lon.end());
      throw std::invalid_argument(
          context + ": point " + std::to_string(p + 1) + " (" + num(v.lon_deg) + " " +
          num(v.lat_deg) + ") is outside the grid (latitude " + num(asc.front()) + ".." +
          num(asc.back()) + ", longitude " +
          (grid.periodic() ? std::string("global") : num(lon_lo) + ".." + num(lon_hi)) + ")");
    }
  }
  stencils_.reserve(path_.lat_deg.size());
  std::vector<char> need(ny, 0);
  for (std::size_t k = 0; k < path_.lat_deg.size(); ++k) {
    stencils_.push_back(locate(path_.lat_deg[k], path_.lon_deg[k]));
    if (stencils_.back().inside) need[stencils_.back().ja] = need[stencils_.back().jb] = 1;
  }
  for (std::size_t j = 0; j < ny; ++j)
    if (need[j]) rows_.push_back(j);

  // g/f per segment at the geodesic midpoint; NaN inside the equatorial band.
  g_over_f_.resize(path_.seg_length_m.size());
  const double band = options.equator_band_deg;
  for (std::size_t k = 0; k < g_over_f_.size(); ++k) {
    const double la = path_.lat_deg[k], lb = path_.lat_deg[k + 1], lm = path_.mid_lat_deg[k];
    const double f = coriolis(lm);  // f = 2 Omega sin(lat), s-1 (grid.hpp)
    const bool in_band = std::fabs(la) < band || std::fabs(lb) < band || std::fabs(lm) < band ||
                         la * lb < 0.0 || f == 0.0;
    g_over_f_[k] = in_band ? nan : gravity_at(options, lm) / f;  // m s
  }
}

std::vector<double> SectionSampler::sample_heights(const Field& block,
                                                   const std::vector<std::size_t>& slot) const {
  std::vector<double> eta(stencils_.size(), nan);
  for (std::size_t k = 0; k < stencils_.size(); ++k) {
    const Stencil& s = stencils_[k];
    if (!s.inside) continue;
    if (s.ja >= slot.size() || s.jb >= slot.size() || slot[s.ja] >= block.ny ||
        slot[s.jb] >= block.ny || block.nx <= std::max(s.ia, s.ib))
      throw std::logic_error("SectionSampler: height rows do not cover the section");
    const double* ra = block.row(slot[s.ja]);
    const double* rb = block.row(slot[s.jb]);
    const double e00 = ra[s.ia], e01 = ra[s.ib], e10 = rb[s.ia], e11 = rb[s.ib];
    // Land-aware: any missing node of the 4 makes the sample missing.
    if (!(std::isfinite(e00) && std::isfinite(e01) && std::isfinite(e10) && std::isfinite(e11)))
      continue;
    // Bilinear in (lat, unwrapped lon) degrees.
    eta[k] = (1 - s.wj) * ((1 - s.wi) * e00 + s.wi * e01) + s.wj * ((1 - s.wi) * e10 + s.wi * e11);
  }
  return eta;
}

SectionResult SectionSampler::evaluate(const Field& block,
                                       const std::vector<std::size_t>& slot) const {
  SectionResult r = integrate_transport(sample_heights(block, slot), path_.seg_length_m, g_over_f_);
  r.length_m = path_.length_m;
  return r;
}

SectionResult SectionSampler::evaluate(const Field& full) const {
  std::vector<std::size_t> slot(full.ny);
  for (std::size_t j = 0; j < full.ny; ++j) slot[j] = j;
  return evaluate(full, slot);
}

// ---- public: the run ---------------------------------------------------------------

SectionSummary run_sections(const SectionJob& job) {
  validate(job.options);
  if (job.sections.empty()) throw UsageError("no section: give --line or --sections");
  if (job.inputs.empty()) throw UsageError("no input file");
  {
    std::set<std::string> names;
    for (const SectionLine& s : job.sections) {
      check_section_name(s.name, "section");
      if (!names.insert(s.name).second)
        throw UsageError("section name '" + shown(s.name) + "' used twice");
    }
  }
  const OutputFormat format = output_format(job.output);
  check_output_target(job.output, job.force);
  for (const std::string& in : job.inputs) {
    struct stat a {
    }, b{};
    if (::stat(in.c_str(), &a) == 0 && ::stat(job.output.c_str(), &b) == 0 &&
        a.st_dev == b.st_dev && a.st_ino == b.st_ino)
      throw OutputError(job.output + ": output would overwrite its own input");
  }

  std::vector<Step> steps;
  std::vector<SectionPath> paths;
  std::vector<double> spacings;
  TimeMeta tm;
  std::optional<HeightInfo> first;
  std::optional<Grid> grid;
  std::vector<SectionSampler> samplers;
  for (std::size_t n = 0; n < job.inputs.size(); ++n) {
    Reader reader(job.inputs[n], job.reader);
    const HeightInfo& in = reader.info();
    if (format == OutputFormat::netcdf) {
      if (!in.time)
        throw InputError(input_message(in.path, in.variable,
                                       "no time coordinate; the netCDF section output needs "
                                       "one (write .csv instead)"));
      const std::string units = attr_text(in.time->attrs, "units");
      if (n == 0) {
        tm = TimeMeta{true, units, in.calendar};
      } else if (units != tm.units || in.calendar != tm.calendar) {
        throw InputError(input_message(
            in.path, in.time->name,
            "time units '" + units + "' (calendar " + in.calendar + ") differ from '" + tm.units +
                "' (calendar " + tm.calendar + ") of " + job.inputs[0] +
                "; the netCDF output needs one time axis (write .csv instead)"));
      }
    }
    if (!first) first = in;
    // Samplers depend only on the grid: rebuilt when it changes between inputs.
    const bool same_grid =
        grid && grid->lat_deg() == in.lat.values && grid->lon_deg() == in.lon.values;
    if (!same_grid) {
      try {
        grid.emplace(in.lat.values, in.lon.values);
      } catch (const std::invalid_argument& e) {
        throw InputError(input_message(in.path, in.variable, e.what()));
      }
      samplers.clear();
      for (const SectionLine& s : job.sections) {
        try {
          samplers.emplace_back(*grid, s, job.options);
        } catch (const std::invalid_argument& e) {
          throw InputError(input_message(in.path, "", e.what()));
        }
      }
    }
    if (paths.empty())
      for (const SectionSampler& s : samplers) {
        paths.push_back(s.path());
        spacings.push_back(s.spacing_m());
      }

    // The rows every section needs, read in contiguous runs into one compact block.
    std::vector<char> need(in.ny, 0);
    for (const SectionSampler& s : samplers)
      for (std::size_t j : s.rows()) need[j] = 1;
    std::vector<std::size_t> slot(in.ny, static_cast<std::size_t>(-1));
    std::size_t nrows = 0;
    for (std::size_t j = 0; j < in.ny; ++j)
      if (need[j]) slot[j] = nrows++;
    require_memory(16.0 * static_cast<double>(nrows) * static_cast<double>(in.nx),  // block + run
                   "the " + std::to_string(nrows) + " rows the sections cross", in.path, in.variable);
    Field block(nrows, in.nx, nan), run;
    for (std::size_t t = 0; t < in.nt; ++t) {
      for (std::size_t j = 0; j < in.ny;) {
        if (!need[j]) {
          ++j;
          continue;
        }
        std::size_t e = j;
        while (e < in.ny && need[e]) ++e;
        reader.read_rows(t, j, e - j, run);
        std::copy(run.data.begin(), run.data.end(), block.row(slot[j]));
        j = e;
      }
      Step st;
      st.input = n;
      if (in.time) {
        st.iso = reader.date(t).iso();
        st.time_value = in.time->values[t];
      }
      for (const SectionSampler& s : samplers) st.results.push_back(s.evaluate(block, slot));
      steps.push_back(std::move(st));
    }
  }

  if (format == OutputFormat::netcdf) {
    std::stable_sort(steps.begin(), steps.end(),
                     [](const Step& a, const Step& b) { return a.time_value < b.time_value; });
    for (std::size_t t = 1; t < steps.size(); ++t)
      if (!(steps[t].time_value > steps[t - 1].time_value))
        throw InputError(input_message(job.inputs[steps[t].input], "",
                                       "time " + steps[t].iso + " occurs twice (in " +
                                           job.inputs[steps[t - 1].input] +
                                           " too); the netCDF output needs distinct times"));
    write_netcdf(job, steps, paths, spacings, tm, *first);
  } else {
    write_csv(job, steps);
  }

  SectionSummary sum;
  sum.steps = steps.size();
  sum.rows = steps.size() * job.sections.size();
  sum.min_excluded_fraction = 1.0;
  sum.max_excluded_fraction = 0.0;
  for (const Step& st : steps)
    for (const SectionResult& r : st.results) {
      sum.min_excluded_fraction = std::min(sum.min_excluded_fraction, r.excluded_fraction);
      sum.max_excluded_fraction = std::max(sum.max_excluded_fraction, r.excluded_fraction);
    }
  return sum;
}

}  // namespace seatilt
