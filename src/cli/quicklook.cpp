// `seatilt quicklook`: draw one field of one time step as a PNG map.
#include "seatilt/quicklook.hpp"

#include <cstdio>
#include <string>

#include "cli.hpp"
#include "seatilt/error.hpp"

namespace seatilt::cli {
namespace {

struct QuicklookArgs {
  std::string input, output, field, region, range;
  std::size_t time = 0;
  bool arrows = false;
  int width = 1000;
  bool force = false;
} qargs;

CLI::App* add_quicklook(CLI::App& app) {
  CLI::App* c =
      app.add_subcommand("quicklook", "draw one field of a height or currents file as a PNG map");
  c->fallthrough();
  c->add_option("input", qargs.input, "input netCDF file (heights, or an output of currents)")
      ->required();
  c->add_option("-o,--output", qargs.output, "PNG file to write")->required();
  c->add_option("--field", qargs.field,
                "variable to draw (default: speed in a currents file, else the height)");
  c->add_option("--time", qargs.time, "time step, counted from 0")->capture_default_str();
  c->add_option("--region", qargs.region,
                "LON0,LON1,LAT0,LAT1 in degrees; LON1 < LON0 crosses the seam (default: the "
                "grid); on projected grids the cells whose centres lie inside");
  c->add_option("--range", qargs.range, "A,B: colour range (default: 2nd-98th percentile)");
  c->add_flag("--arrows", qargs.arrows, "current arrows from u and v (currents files)");
  c->add_option("--width", qargs.width, "PNG width in pixels, 320..4096")->capture_default_str();
  c->add_flag("--force", qargs.force, "overwrite an existing PNG");
  return c;
}

int run_quicklook_command() {
  QuicklookOptions o;
  if (!qargs.region.empty()) o.region = parse_region(qargs.region);
  if (!qargs.range.empty()) o.range = parse_range(qargs.range);
  o.arrows = qargs.arrows;
  o.width_px = qargs.width;
  o.force = qargs.force;
  if (o.width_px < 320 || o.width_px > 4096)
    throw UsageError("--width: " + std::to_string(o.width_px) + " px is outside 320..4096");

  MapRequest request;
  request.field = qargs.field;
  request.time = qargs.time;
  request.arrows = qargs.arrows;
  const MapData map = read_map_data(qargs.input, request);
  const QuicklookResult r = write_quicklook(map, o, qargs.output);

  char buf[512];
  std::snprintf(buf, sizeof buf,
                "wrote %s (%d x %d px): %s [%s]%s%s, %s colours %.6g .. %.6g (%s), map box "
                "%d,%d,%d,%d, colour bar %d,%d,%d,%d, region lon %.6g..%.6g lat %.6g..%.6g",
                qargs.output.c_str(), r.width_px, r.height_px, map.variable.c_str(),
                map.units.c_str(), map.date.empty() ? "" : " at ", map.date.c_str(),
                r.scale == ColourScale::diverging ? "diverging" : "sequential", r.range.low,
                r.range.high, r.range_from_percentiles ? "2nd-98th percentile" : "--range", r.map.x,
                r.map.y, r.map.width, r.map.height, r.colour_bar.x, r.colour_bar.y,
                r.colour_bar.width, r.colour_bar.height, r.region.lon0, r.region.lon1,
                r.region.lat0, r.region.lat1);
  std::string line = buf;
  if (r.grid_kind != GridKind::lat_lon) {
    std::snprintf(buf, sizeof buf, ", %s grid window %.9g..%.9g, %.9g..%.9g", map.grid_name.c_str(),
                  r.window.c0, r.window.c1, r.window.r0, r.window.r1);
    line += buf;
  }
  std::snprintf(buf, sizeof buf, ", %zu graticule labels", r.graticule_labels);
  line += buf;
  if (o.arrows) {
    std::snprintf(buf, sizeof buf, ", %zu arrows (reference %.3g %s)", r.arrow_count,
                  r.arrow_reference, map.arrow_units.c_str());
    line += buf;
  }
  info(line);
  return 0;
}

}  // namespace

const bool registered_quicklook =
    register_command({"quicklook", add_quicklook, run_quicklook_command});

}  // namespace seatilt::cli
