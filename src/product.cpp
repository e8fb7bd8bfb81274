#include "seatilt/product.hpp"

#include <netcdf.h>

#include <algorithm>
#include <cmath>
#include <ctime>
#include <sstream>

#include "seatilt/error.hpp"

namespace seatilt {

namespace {

struct Spec {
  const char* name;
  const char* standard_name;          // absolute input ("" = none in CF table [1])
  const char* standard_name_anomaly;  // anomaly input
  const char* long_name;
  const char* units;
};

// The output catalogue. To add a field: a row here, its computation in
// diagnostics.cpp, and its copy into the writer call in tiling.cpp.
const Spec catalogue[] = {
    {"u", "surface_geostrophic_eastward_sea_water_velocity",
     "surface_geostrophic_eastward_sea_water_velocity_assuming_mean_sea_level_for_geoid",
     "eastward geostrophic surface velocity", "m s-1"},
    {"v", "surface_geostrophic_northward_sea_water_velocity",
     "surface_geostrophic_northward_sea_water_velocity_assuming_mean_sea_level_for_geoid",
     "northward geostrophic surface velocity", "m s-1"},
    {"speed", "sea_water_speed", "sea_water_speed", "geostrophic surface speed", "m s-1"},
    {"vorticity", "ocean_relative_vorticity", "ocean_relative_vorticity",
     "relative vorticity of the geostrophic surface flow", "s-1"},
    {"strain_normal", "", "", "normal strain rate du/dx - dv/dy of the geostrophic surface flow",
     "s-1"},
    {"strain_shear", "", "", "shear strain rate dv/dx + du/dy of the geostrophic surface flow",
     "s-1"},
    {"strain", "", "", "total strain rate sqrt(strain_normal^2 + strain_shear^2)", "s-1"},
    {"okubo_weiss", "", "", "Okubo-Weiss parameter strain^2 - vorticity^2", "s-2"},
};

std::string now_iso() {
  std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

std::string existing_text(const std::vector<Attribute>& attrs, const std::string& name) {
  for (const auto& a : attrs)
    if (a.name == name && (a.nc_type == NC_CHAR || a.nc_type == NC_STRING)) return a.text;
  return {};
}

}  // namespace

Attribute text_attribute(const std::string& name, const std::string& value) {
  Attribute a;
  a.name = name;
  a.nc_type = NC_CHAR;
  a.text = value;
  return a;
}

Attribute number_attribute(const std::string& name, int nc_type, std::vector<double> values) {
  Attribute a;
  a.name = name;
  a.nc_type = nc_type;
  a.values = std::move(values);
  return a;
}

const std::vector<std::string>& currents_field_names() {
  static const std::vector<std::string> names = [] {
    std::vector<std::string> n;
    for (const auto& s : catalogue) n.emplace_back(s.name);
    n.emplace_back("quality");
    return n;
  }();
  return names;
}

std::vector<std::string> parse_field_list(const std::string& list) {
  const auto& all = currents_field_names();
  if (list.empty() || list == "all") return all;
  std::vector<bool> want(all.size(), false);
  std::stringstream ss(list);
  std::string item;
  while (std::getline(ss, item, ',')) {
    item.erase(0, item.find_first_not_of(" \t"));
    item.erase(item.find_last_not_of(" \t") + 1);
    if (item.empty()) continue;
    if (item == "all") return all;
    const auto it = std::find(all.begin(), all.end(), item);
    if (it == all.end()) {
      std::string known;
      for (const auto& n : all) known += (known.empty() ? "" : ", ") + n;
      throw UsageError("--fields: unknown field '" + item + "' (known: " + known + ")");
    }
    want[static_cast<std::size_t>(it - all.begin())] = true;
  }
  want.back() = true;  // quality is always written
  std::vector<std::string> out;
  for (std::size_t k = 0; k < all.size(); ++k)
    if (want[k]) out.push_back(all[k]);
  return out;
}

std::vector<OutputVariable> currents_variables(const std::vector<std::string>& fields,
                                               HeightKind kind) {
  std::vector<OutputVariable> out;
  for (const auto& name : fields) {
    OutputVariable ov;
    ov.name = name;
    if (name == "quality") {
      ov.type = OutputType::flag8;
      ov.attrs.push_back(text_attribute("standard_name", "quality_flag"));
      ov.attrs.push_back(text_attribute("long_name", "geostrophic velocity quality flags"));
      ov.attrs.push_back(number_attribute("flag_masks", NC_BYTE, {1, 2, 4, 8, 16, 32, 64}));
      ov.attrs.push_back(text_attribute("flag_meanings", quality::meanings));
      ov.attrs.push_back(text_attribute(
          "comment",
          "Bit field; 0 = full centred stencil, f-plane geostrophy. one_sided_difference: a "
          "shortened or one-sided stencil was used next to missing cells or the domain edge; "
          "beta_plane_equator / blended_equator: equatorial treatment; the masked_* and "
          "missing_height bits mark cells written as _FillValue."));
      ov.attrs.push_back(text_attribute("coverage_content_type", "qualityInformation"));
      out.push_back(std::move(ov));
      continue;
    }
    const auto* spec = std::find_if(std::begin(catalogue), std::end(catalogue),
                                    [&](const Spec& s) { return name == s.name; });
    if (spec == std::end(catalogue)) throw UsageError("--fields: unknown field '" + name + "'");
    const char* sn = kind == HeightKind::anomaly ? spec->standard_name_anomaly : spec->standard_name;
    if (*sn) ov.attrs.push_back(text_attribute("standard_name", sn));
    ov.attrs.push_back(text_attribute("long_name", spec->long_name));
    ov.attrs.push_back(text_attribute("units", spec->units));
    ov.attrs.push_back(text_attribute("coverage_content_type", "modelResult"));
    ov.attrs.push_back(text_attribute("ancillary_variables", "quality"));
    out.push_back(std::move(ov));
  }
  return out;
}

const char* currents_caution() {
  return "Geostrophic surface currents derived from sea-surface height alone. They are not "
         "total currents: Ekman (wind-driven), tidal, inertial and wave-driven flows are not "
         "included, and the balance fails near the equator, at coasts and at scales the height "
         "map does not resolve. Not for navigation or safety-of-life decisions.";
}

const char* to_string(EquatorMethod m) {
  switch (m) {
    case EquatorMethod::mask: return "mask";
    case EquatorMethod::beta: return "beta";
    case EquatorMethod::blend: return "blend";
  }
  return "?";
}
const char* to_string(CoastMethod m) { return m == CoastMethod::mask ? "mask" : "one-sided"; }
const char* to_string(EarthModel m) { return m == EarthModel::sphere ? "sphere" : "wgs84"; }

bool parse_equator(const std::string& text, EquatorMethod& out) {
  for (EquatorMethod m : {EquatorMethod::mask, EquatorMethod::beta, EquatorMethod::blend})
    if (text == to_string(m)) return out = m, true;
  return false;
}
bool parse_coast(const std::string& text, CoastMethod& out) {
  for (CoastMethod m : {CoastMethod::one_sided, CoastMethod::mask})
    if (text == to_string(m)) return out = m, true;
  return false;
}
bool parse_earth(const std::string& text, EarthModel& out) {
  for (EarthModel m : {EarthModel::sphere, EarthModel::wgs84})
    if (text == to_string(m)) return out = m, true;
  return false;
}
bool parse_gravity_name(const std::string& text, GravityModel& out) {
  if (text == "standard") return out = GravityModel::standard, true;
  if (text == "wgs84") return out = GravityModel::wgs84, true;
  return false;
}

std::string gravity_description(const CurrentsOptions& o) {
  switch (o.gravity) {
    case GravityModel::standard: return "standard 9.80665 m s-2";
    case GravityModel::wgs84: return "wgs84 normal gravity";
    case GravityModel::constant: {
      std::ostringstream s;
      s.precision(10);
      s << o.gravity_value << " m s-2";
      return s.str();
    }
  }
  return "?";
}

std::vector<Attribute> currents_global_attributes(const HeightInfo& in,
                                                  const CurrentsOptions& o,
                                                  const std::string& command_line) {
  std::vector<Attribute> g;
  const std::string created = now_iso();
  g.push_back(text_attribute("Conventions", "CF-1.12, ACDD-1.3"));
  g.push_back(text_attribute("title", "Geostrophic surface currents and kinematics from " +
                                          in.variable + " of " + in.path));
  g.push_back(text_attribute(
      "summary",
      "Surface geostrophic velocity (u, v) computed from the sea-surface height variable '" +
          in.variable + "' (" +
          (in.kind == HeightKind::anomaly ? "sea level anomaly" : "absolute dynamic topography") +
          "), with speed, relative vorticity, strain and the Okubo-Weiss parameter."));
  g.push_back(text_attribute("keywords", "geostrophic currents, sea surface height, vorticity, "
                                         "strain, Okubo-Weiss"));
  g.push_back(text_attribute("comment", currents_caution()));
  std::string history = created + " " + command_line;
  const std::string old = existing_text(in.global_attrs, "history");
  if (!old.empty()) history += "\n" + old;
  g.push_back(text_attribute("history", history));
  g.push_back(text_attribute("source", std::string("seatilt ") + SEATILT_VERSION +
                                           " from " + in.path));
  g.push_back(text_attribute("processing_level", "L4 derived product"));
  g.push_back(text_attribute("standard_name_vocabulary", "CF Standard Name Table v83"));
  g.push_back(text_attribute("date_created", created));
  const auto [lat_lo, lat_hi] = std::minmax_element(in.lat.values.begin(), in.lat.values.end());
  const auto [lon_lo, lon_hi] = std::minmax_element(in.lon.values.begin(), in.lon.values.end());
  g.push_back(number_attribute("geospatial_lat_min", NC_DOUBLE, {*lat_lo}));
  g.push_back(number_attribute("geospatial_lat_max", NC_DOUBLE, {*lat_hi}));
  g.push_back(text_attribute("geospatial_lat_units", "degrees_north"));
  g.push_back(number_attribute("geospatial_lon_min", NC_DOUBLE, {*lon_lo}));
  g.push_back(number_attribute("geospatial_lon_max", NC_DOUBLE, {*lon_hi}));
  g.push_back(text_attribute("geospatial_lon_units", "degrees_east"));
  g.push_back(text_attribute(
      "references",
      "Arbic et al. (2012) JGR 117 C03029 (stencils); Lagerloef et al. (1999) JGR 104(C10) "
      "23313 (equatorial blend); NIMA TR8350.2 (WGS84)"));
  g.push_back(number_attribute("geostrophy_stencil_order", NC_INT, {static_cast<double>(o.order)}));
  g.push_back(text_attribute("geostrophy_equator_method", to_string(o.equator)));
  g.push_back(number_attribute("geostrophy_equator_band_deg", NC_DOUBLE, {o.equator_band_deg}));
  g.push_back(text_attribute("geostrophy_coast_method", to_string(o.coast)));
  g.push_back(text_attribute("geostrophy_earth_model", to_string(o.earth)));
  g.push_back(text_attribute("geostrophy_gravity", gravity_description(o)));
  g.push_back(text_attribute("input_height_variable", in.variable));
  g.push_back(text_attribute("input_height_kind",
                             in.kind == HeightKind::anomaly ? "anomaly" : "absolute"));
  g.push_back(text_attribute("input_height_units", in.units));
  return g;
}

}  // namespace seatilt
