// `seatilt inspect`: explain what a run would do with a file.
#include <cmath>
#include <cstdio>
#include <sstream>
#include <string>
#include <vector>

#include "cli.hpp"
#include "seatilt/error.hpp"
#include "seatilt/grid.hpp"
#include "seatilt/tiling.hpp"

namespace seatilt::cli {
namespace {

struct InspectArgs {
  std::string input;
  bool json = false;
  std::string variable, units;
} iargs;

std::string json_string(const std::string& s) {
  std::string o = "\"";
  for (unsigned char c : s) {
    switch (c) {
      case '"': o += "\\\""; break;
      case '\\': o += "\\\\"; break;
      case '\n': o += "\\n"; break;
      case '\r': o += "\\r"; break;
      case '\t': o += "\\t"; break;
      default:
        if (c < 0x20) {
          char buf[8];
          std::snprintf(buf, sizeof buf, "\\u%04x", c);
          o += buf;
        } else {
          o += static_cast<char>(c);
        }
    }
  }
  return o + "\"";
}

std::string num(double x) {
  if (!std::isfinite(x)) return "null";
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.10g", x);
  return buf;
}

const char* storage_name(int t) {
  switch (t) {
    case 1: return "byte";
    case 2: return "char";
    case 3: return "short";
    case 4: return "int";
    case 5: return "float";
    case 6: return "double";
    case 7: return "ubyte";
    case 8: return "ushort";
    case 9: return "uint";
    case 10: return "int64";
    case 11: return "uint64";
    default: return "other";
  }
}

/// Share of missing cells over every step, read in bands of bounded size.
double fill_fraction_of(Reader& reader) {
  const HeightInfo& in = reader.info();
  std::size_t missing = 0;
  const std::size_t band =
      std::max<std::size_t>(1, (8u << 20) / (8 * std::max<std::size_t>(in.nx, 1)));
  Field rows;
  for (std::size_t t = 0; t < in.nt; ++t)
    for (std::size_t j = 0; j < in.ny; j += band) {
      const std::size_t n = std::min(band, in.ny - j);
      reader.read_rows(t, j, n, rows);
      for (double x : rows.data) missing += std::isnan(x);
    }
  const double total = static_cast<double>(in.nt * in.ny * in.nx);
  return total > 0 ? static_cast<double>(missing) / total : 0.0;
}

std::vector<std::string> dates_of(const Reader& reader) {
  std::vector<std::string> times;
  if (reader.info().time)
    for (std::size_t t = 0; t < reader.info().nt; ++t) {
      try {
        times.push_back(reader.date(t).iso());
      } catch (const Error&) {
        times.push_back("undecodable");
      }
    }
  return times;
}

/// Numbers at full double precision (17 significant digits) for JSON.
std::string full(double x) {
  if (!std::isfinite(x)) return "null";
  char buf[40];
  std::snprintf(buf, sizeof buf, "%.17g", x);
  return buf;
}

/// `inspect` of a projected or curvilinear input (docs/projected.md).
int inspect_plane(Reader& reader) {
  const HeightInfo& in = reader.info();
  const CurvilinearGrid grid = make_curvilinear_grid(in, EarthModel::wgs84);
  const double fill_fraction = fill_fraction_of(reader);
  const std::vector<std::string> times = dates_of(reader);
  double lat_min = 90, lat_max = -90, lon_min = 360, lon_max = -360;
  for (std::size_t k = 0; k < grid.lat_deg().size(); ++k) {
    lat_min = std::min(lat_min, grid.lat_deg()[k]);
    lat_max = std::max(lat_max, grid.lat_deg()[k]);
    lon_min = std::min(lon_min, grid.lon_deg()[k]);
    lon_max = std::max(lon_max, grid.lon_deg()[k]);
  }
  const bool projected = grid.projected();
  const char* kind_name = projected ? "projected" : "curvilinear";
  const auto step = [](const std::vector<double>& v) {
    return v.size() > 1 ? (v.back() - v.front()) / static_cast<double>(v.size() - 1) : 0.0;
  };
  const double x_step = projected ? step(in.x_m) : std::nan("");
  const double y_step = projected ? step(in.y_m) : std::nan("");
  const char* kind = in.kind == HeightKind::anomaly ? "anomaly" : "absolute";
  // Scale factors and convergence at the corners and the centre.
  struct Sample {
    std::size_t j, i;
    ProjectionFactors f;
  };
  std::vector<Sample> samples;
  if (const Projection* p = grid.projection()) {
    const std::size_t ny = grid.ny(), nx = grid.nx();
    const std::size_t js[] = {0, 0, ny - 1, ny - 1, ny / 2}, is[] = {0, nx - 1, 0, nx - 1, nx / 2};
    for (int k = 0; k < 5; ++k)
      samples.push_back(
          {js[k], is[k], p->factors(grid.col_coord()[is[k]], grid.row_coord()[js[k]])});
  }
  const std::string lat_name = in.lat2d ? in.lat2d->name : "",
                    lon_name = in.lon2d ? in.lon2d->name : "";

  std::ostringstream o;
  if (iargs.json) {
    const auto opt_name = [](const std::string& n) {
      return n.empty() ? std::string("null") : json_string(n);
    };
    o << "{\"file\": " << json_string(in.path) << ", \"format\": " << json_string(in.format)
      << ", \"variable\": " << json_string(in.variable)
      << ", \"chosen_because\": " << json_string(in.chosen_because)
      << ", \"kind\": " << json_string(kind) << ", \"kind_reason\": " << json_string(in.kind_reason)
      << ", \"standard_name\": " << json_string(in.standard_name)
      << ", \"units\": " << json_string(in.units)
      << ", \"units_overridden\": " << (in.units_overridden ? "true" : "false")
      << ", \"to_metres_scale\": " << num(in.to_metres_scale)
      << ", \"to_metres_offset\": " << num(in.to_metres_offset)
      << ", \"packed\": " << (in.packed ? "true" : "false")
      << ", \"scale_factor\": " << num(in.scale_factor)
      << ", \"add_offset\": " << num(in.add_offset)
      << ", \"storage_type\": " << json_string(storage_name(in.storage_type))
      << ", \"nt\": " << in.nt << ", \"ny\": " << in.ny << ", \"nx\": " << in.nx
      << ", \"grid_kind\": " << json_string(kind_name) << ", \"x_name\": " << opt_name(in.lon.name)
      << ", \"y_name\": " << opt_name(in.lat.name) << ", \"x_step_m\": " << num(x_step)
      << ", \"y_step_m\": " << num(y_step) << ", \"spacing_m\": " << num(grid.spacing_m())
      << ", \"lat_name\": " << opt_name(lat_name) << ", \"lon_name\": " << opt_name(lon_name)
      << ", \"lat_min\": " << num(lat_min) << ", \"lat_max\": " << num(lat_max)
      << ", \"lat_step_deg\": null, \"lat_descending\": false"
      << ", \"lon_min\": " << num(lon_min) << ", \"lon_max\": " << num(lon_max)
      << ", \"lon_step_deg\": null, \"periodic\": false";
    if (const Projection* p = grid.projection()) {
      std::string ellipsoid;
      o << ", \"projection\": {\"name\": " << json_string(p->name())
        << ", \"variable\": " << json_string(in.grid_mapping.variable)
        << ", \"definition\": " << json_string(p->definition()) << ", \"parameters\": {";
      bool first = true;
      for (const auto& kv : p->parameters()) {
        if (kv.first == "ellipsoid") ellipsoid = kv.second;
        o << (first ? "" : ", ") << json_string(kv.first) << ": " << json_string(kv.second);
        first = false;
      }
      o << "}, \"ellipsoid\": " << json_string(ellipsoid) << ", \"samples\": [";
      for (std::size_t k = 0; k < samples.size(); ++k) {
        const Sample& s = samples[k];
        o << (k ? ", " : "") << "{\"row\": " << s.j << ", \"column\": " << s.i
          << ", \"x\": " << full(grid.col_coord()[s.i])
          << ", \"y\": " << full(grid.row_coord()[s.j]) << ", \"lat\": " << full(s.f.lat_deg)
          << ", \"lon\": " << full(s.f.lon_deg)
          << ", \"meridional_scale\": " << full(s.f.meridional_scale)
          << ", \"parallel_scale\": " << full(s.f.parallel_scale)
          << ", \"areal_scale\": " << full(s.f.areal_scale)
          << ", \"angular_distortion_deg\": " << full(s.f.angular_distortion)
          << ", \"convergence_deg\": " << full(s.f.convergence_deg) << "}";
      }
      o << "]}";
    } else {
      o << ", \"projection\": null";
    }
    o << ", \"time_name\": " << (in.time ? json_string(in.time->name) : "null")
      << ", \"calendar\": " << (in.time ? json_string(in.calendar) : "null") << ", \"times\": [";
    for (std::size_t k = 0; k < times.size(); ++k) o << (k ? ", " : "") << json_string(times[k]);
    o << "], \"fill_fraction\": " << num(fill_fraction) << "}\n";
  } else {
    o << "file:        " << in.path << " (" << in.format << ")\n"
      << "variable:    " << in.variable << " (chosen by " << in.chosen_because << ")\n"
      << "kind:        " << kind << " (" << in.kind_reason << ")\n"
      << "units:       " << in.units << (in.units_overridden ? " (overridden)" : "")
      << " -> metres = value * " << num(in.to_metres_scale) << " + " << num(in.to_metres_offset)
      << "\n"
      << "storage:     " << storage_name(in.storage_type);
    if (in.packed)
      o << ", packed: scale_factor " << num(in.scale_factor) << ", add_offset "
        << num(in.add_offset);
    o << "\n";
    const std::string yname = in.lat.name.empty() ? in.lat.dim : in.lat.name;
    const std::string xname = in.lon.name.empty() ? in.lon.dim : in.lon.name;
    o << "grid:        " << in.ny << " x " << in.nx << " (" << yname << " x " << xname << "), "
      << kind_name;
    if (const Projection* p = grid.projection()) {
      o << ": " << p->name() << " (grid mapping variable " << in.grid_mapping.variable << ")\n"
        << "parameters: ";
      bool first = true;
      for (const auto& kv : p->parameters()) {
        o << (first ? " " : ", ") << kv.first << " " << kv.second;
        first = false;
      }
      o << "\n"
        << "PROJ:        " << p->definition() << "\n"
        << "x:           " << num(in.x_m.front()) << " .. " << num(in.x_m.back()) << " m, step "
        << num(x_step) << " m\n"
        << "y:           " << num(in.y_m.front()) << " .. " << num(in.y_m.back()) << " m, step "
        << num(y_step) << " m\n";
    } else {
      o << " (2-D " << lat_name << ", " << lon_name << "), median spacing " << num(grid.spacing_m())
        << " m\n";
    }
    o << "latitude:    " << num(lat_min) << " .. " << num(lat_max) << " (nodes)\n"
      << "longitude:   " << num(lon_min) << " .. " << num(lon_max) << " (nodes)\n";
    for (const Sample& s : samples) {
      char buf[200];
      std::snprintf(
          buf, sizeof buf,
          "factors:     row %zu, column %zu (%.4f, %.4f): h %.8f, k %.8f, convergence %.6f deg\n",
          s.j, s.i, s.f.lat_deg, s.f.lon_deg, s.f.meridional_scale, s.f.parallel_scale,
          s.f.convergence_deg);
      o << buf;
    }
    if (in.time) {
      o << "time:        " << in.nt << " step(s), calendar " << in.calendar;
      if (!times.empty()) o << ", " << times.front() << " .. " << times.back();
      o << "\n";
    } else {
      o << "time:        none (one map)\n";
    }
    char buf[32];
    std::snprintf(buf, sizeof buf, "%.2f %%", 100.0 * fill_fraction);
    o << "missing:     " << buf << " of cells\n";
  }
  std::fputs(o.str().c_str(), stdout);
  return 0;
}

CLI::App* add_inspect(CLI::App& app) {
  CLI::App* c = app.add_subcommand("inspect", "explain how a height file would be read");
  c->fallthrough();
  c->add_option("input", iargs.input, "input netCDF file")->required();
  c->add_flag("--json", iargs.json, "one JSON object on stdout");
  c->add_option("--variable", iargs.variable, "height variable (default: detected)");
  c->add_option("--units", iargs.units, "override the height variable's units");
  return c;
}

int run_inspect_command() {
  ReaderOptions ro;
  ro.variable = iargs.variable;
  ro.units = iargs.units;
  ro.horizontal_grids = true;  // projected and curvilinear inputs (docs/projected.md)
  Reader reader(iargs.input, ro);
  const HeightInfo& in = reader.info();
  if (in.grid_kind != GridKind::lat_lon) return inspect_plane(reader);
  Grid grid = [&] {
    try {
      return Grid(in.lat.values, in.lon.values);
    } catch (const std::invalid_argument& e) {
      throw InputError(input_message(in.path, in.variable, e.what()));
    }
  }();

  const double fill_fraction = fill_fraction_of(reader);
  const std::vector<std::string> times = dates_of(reader);
  const auto& la = in.lat.values;
  const auto& lo = in.lon.values;
  const double lat_min = std::min(la.front(), la.back()), lat_max = std::max(la.front(), la.back());
  double lon_min = lo.front(), lon_max = lo.front();
  for (double x : lo) { lon_min = std::min(lon_min, x); lon_max = std::max(lon_max, x); }
  const char* kind = in.kind == HeightKind::anomaly ? "anomaly" : "absolute";

  std::ostringstream o;
  if (iargs.json) {
    o << "{\"file\": " << json_string(in.path) << ", \"format\": " << json_string(in.format)
      << ", \"variable\": " << json_string(in.variable)
      << ", \"chosen_because\": " << json_string(in.chosen_because)
      << ", \"kind\": " << json_string(kind) << ", \"kind_reason\": " << json_string(in.kind_reason)
      << ", \"standard_name\": " << json_string(in.standard_name)
      << ", \"units\": " << json_string(in.units)
      << ", \"units_overridden\": " << (in.units_overridden ? "true" : "false")
      << ", \"to_metres_scale\": " << num(in.to_metres_scale)
      << ", \"to_metres_offset\": " << num(in.to_metres_offset)
      << ", \"packed\": " << (in.packed ? "true" : "false")
      << ", \"scale_factor\": " << num(in.scale_factor)
      << ", \"add_offset\": " << num(in.add_offset)
      << ", \"storage_type\": " << json_string(storage_name(in.storage_type))
      << ", \"nt\": " << in.nt << ", \"ny\": " << in.ny << ", \"nx\": " << in.nx
      << ", \"grid_kind\": \"latitude_longitude\""
      << ", \"lat_name\": " << json_string(in.lat.name)
      << ", \"lon_name\": " << json_string(in.lon.name) << ", \"lat_min\": " << num(lat_min)
      << ", \"lat_max\": " << num(lat_max) << ", \"lat_step_deg\": " << num(grid.dlat_deg())
      << ", \"lat_descending\": " << (grid.lat_descending() ? "true" : "false")
      << ", \"lon_min\": " << num(lon_min) << ", \"lon_max\": " << num(lon_max)
      << ", \"lon_step_deg\": " << num(grid.dlon_deg())
      << ", \"periodic\": " << (grid.periodic() ? "true" : "false")
      << ", \"time_name\": " << (in.time ? json_string(in.time->name) : "null")
      << ", \"calendar\": " << (in.time ? json_string(in.calendar) : "null") << ", \"times\": [";
    for (std::size_t k = 0; k < times.size(); ++k) o << (k ? ", " : "") << json_string(times[k]);
    o << "], \"fill_fraction\": " << num(fill_fraction) << "}\n";
  } else {
    o << "file:        " << in.path << " (" << in.format << ")\n"
      << "variable:    " << in.variable << " (chosen by " << in.chosen_because << ")\n"
      << "kind:        " << kind << " (" << in.kind_reason << ")\n"
      << "units:       " << in.units << (in.units_overridden ? " (overridden)" : "")
      << " -> metres = value * " << num(in.to_metres_scale) << " + " << num(in.to_metres_offset)
      << "\n"
      << "storage:     " << storage_name(in.storage_type);
    if (in.packed)
      o << ", packed: scale_factor " << num(in.scale_factor) << ", add_offset " << num(in.add_offset);
    o << "\n"
      << "grid:        " << in.ny << " x " << in.nx << " (" << in.lat.name << " x " << in.lon.name
      << ")\n"
      << "latitude:    " << num(lat_min) << " .. " << num(lat_max) << ", step " << num(grid.dlat_deg())
      << (grid.lat_descending() ? " (descending)" : " (ascending)") << "\n"
      << "longitude:   " << num(lon_min) << " .. " << num(lon_max) << ", step "
      << num(grid.dlon_deg()) << (grid.periodic() ? " (global, periodic)" : " (regional)")
      << "\n";
    if (in.time) {
      o << "time:        " << in.nt << " step(s), calendar " << in.calendar;
      if (!times.empty()) o << ", " << times.front() << " .. " << times.back();
      o << "\n";
    } else {
      o << "time:        none (one map)\n";
    }
    char buf[32];
    std::snprintf(buf, sizeof buf, "%.2f %%", 100.0 * fill_fraction);
    o << "missing:     " << buf << " of cells\n";
  }
  std::fputs(o.str().c_str(), stdout);
  return 0;
}

}  // namespace

const bool registered_inspect = register_command({"inspect", add_inspect, run_inspect_command});

}  // namespace seatilt::cli
