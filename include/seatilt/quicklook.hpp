// seatilt/quicklook.hpp — PNG quick-look maps of one field at one time step.
//
// Owns: reading one 2-D field (and optionally u, v) of one time step for a
// map, choosing a colour map and a robust colour range, and drawing a PNG
// with Cairo: an equirectangular map of the cells, a colour bar with units,
// a title with the variable's long_name and the date, a labelled graticule,
// optional current arrows with a reference arrow, written atomically. Does
// not own any physics; the values are drawn as read.
//
// Inputs
//  - Height files: the height variable is found, unpacked and converted to
//    metres by seatilt::Reader (reader.hpp), exactly as `currents` reads it.
//  - Any other variable on (lat, lon) or (time, lat, lon) — the outputs of
//    `currents` (u, v, speed, vorticity, strain..., okubo_weiss) and other CF
//    files — is read with the netCDF-C API: scale_factor/add_offset,
//    _FillValue (or the netCDF default fill of the type), missing_value and
//    valid_min/valid_max/valid_range honoured [1] 2.5.1, 8.1; units as in
//    the file. Latitude/longitude are the CF coordinate variables of the last
//    two dimensions [1] 4.1, 4.2; the dimension before them, when present, is
//    time (CF time decoded by decode_cf_time, reader.hpp); any other leading
//    dimension must have length 1. Variables on projected or curvilinear
//    grids: see "Projected and curvilinear grids" below.
//
// Colour maps
//  - sequential (magnitudes: speed, strain, absolute height, ...): viridis
//    [2], 256 entries, a value at fraction t of the range takes entry
//    min(255, floor(256 t)) as matplotlib's ListedColormap does.
//  - diverging (signed fields: u, v, vorticity, strain components,
//    Okubo–Weiss, sea level anomaly): ColorBrewer RdBu [3] reversed (blue for
//    negative, red for positive), linear in sRGB between its 11 published
//    control points; the centre t = 0.5 is exactly the middle point
//    (247, 247, 247), and the range is symmetric about zero, so zero maps to it.
//  - cells without a value (fill, land, outside the grid): neutral grey
//    (153, 153, 153) (common practice, no source).
//  Range: --range, otherwise the 2nd and 98th percentiles of the cells
//  inside the map (numpy.percentile's default "linear" method, Hyndman &
//  Fan (1996) type 7 [4]); diverging: [-m, m] with m the larger magnitude.
//
// Map projection: equirectangular, x = lon * cos(lat_c), y = lat, with
// lat_c the centre latitude of the map (plate carrée for a map centred on the
// equator) [5]; the aspect ratio is clamped to 0.2..1.5 (height/width), so
// very tall or very flat regions are stretched. Cells are drawn as nearest
// cell to each pixel centre (no interpolation). Longitudes in 0..360 or
// -180..180, ascending or crossing the seam, and descending latitudes are
// handled; a region may cross the seam of a global grid.
//
// Projected and curvilinear grids (docs/projected.md; found as `currents`
// finds them, ReaderOptions::horizontal_grids) are drawn on their own grid:
// x (or the column index) to the right, y (or the row index) up (2-D
// latitude/longitude: an index axis is flipped when it runs west or south at
// the centre node), one pixel showing the cell whose edges (halfway between
// the coordinates) contain it; the page keeps the ground aspect (projected: y extent / x extent in
// metres; curvilinear: rows x median row spacing / columns x median column
// spacing, on the ground), clamped to 0.2..1.5 like lat/lon maps. The
// graticule is drawn by contouring latitude and longitude sampled on a
// lattice of about 4 px: PROJ's inverse projection [6] for projected grids,
// for 2-D latitude/longitude bilinear interpolation of the nodes' unit
// vectors (no seam or pole singularity; extrapolated half a cell beyond the
// outer nodes). Lines are labelled where they cross the frame, without
// overlapping labels. Arrows: u, v are true east/north components; their
// direction on the page is (dc/dt, dr/dt) = (e_c u + n_c v, e_r u + n_r v)
// with the node's DirectionalMetric (grid.hpp), scaled by pixels per grid
// unit on each axis, which covers the convergence of the meridians and any
// non-conformal distortion.
//
// References
//  [1] CF Conventions 1.12.
//  [2] N. J. Smith, S. van der Walt, E. Firing (2015), viridis colour map,
//      https://bids.github.io/colormap/, released under CC0 1.0; table as in
//      matplotlib 3.6.3 lib/matplotlib/_cm_listed.py.
//  [3] C. A. Brewer, ColorBrewer 2.0, https://colorbrewer2.org/, scheme RdBu,
//      11 classes ("This product includes color specifications and designs
//      developed by Cynthia Brewer (http://colorbrewer.org/)", Apache-style
//      ColorBrewer licence).
//  [4] R. J. Hyndman, Y. Fan (1996), Sample quantiles in statistical
//      packages, The American Statistician 50(4), 361-365,
//      doi:10.1080/00031305.1996.10473566 (definition 7).
//  [5] J. P. Snyder (1987), Map Projections — A Working Manual, USGS
//      Professional Paper 1395, chapter 12 (equidistant cylindrical).
//  [6] PROJ 9.1 C API, proj_trans (inverse projection).
//
// Text uses Cairo's toy font API ("sans-serif"). Without any installed font
// Cairo falls back to its built-in stroke font; labels are then written in
// ASCII only (e.g. "45N" instead of "45°N").
//
// Thread safety: netCDF-C is not thread-safe; call from one thread.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "seatilt/grid.hpp"
#include "seatilt/reader.hpp"

namespace seatilt {

/// Kind of colour map.
enum class ColourScale {
  sequential,  ///< viridis, for magnitudes
  diverging,   ///< RdBu reversed, centred on zero, for signed fields
};

/// An 8-bit sRGB colour as written to the PNG.
struct Rgb8 {
  std::uint8_t r = 0, g = 0, b = 0;
  friend bool operator==(const Rgb8& a, const Rgb8& b) {
    return a.r == b.r && a.g == b.g && a.b == b.b;
  }
  friend bool operator!=(const Rgb8& a, const Rgb8& b) { return !(a == b); }
};

/// Returns the colour at fraction T (0..1, clamped; NaN gives the no-data
/// grey) of the colour map SCALE.
Rgb8 colour_at(ColourScale scale, double t);

/// Returns the neutral grey of cells without a value (153, 153, 153).
Rgb8 no_data_colour();

/// A closed interval of values (units of the field).
struct ValueRange {
  double low = 0.0, high = 1.0;
};

/// Returns the P-th percentile (P in 0..100) of VALUES (finite values only;
/// order irrelevant) by linear interpolation between order statistics:
/// h = (n-1) P/100, x[floor h] + (h - floor h)(x[floor h + 1] - x[floor h])
/// ([4] definition 7, numpy's default). Throws std::invalid_argument for an
/// empty VALUES or P outside 0..100.
double percentile(std::vector<double> values, double p);

/// Returns the colour range of VALUES (NaN ignored): the 2nd..98th
/// percentile; diverging: [-m, m], m = max(|p2|, |p98|). A degenerate range
/// (all values equal, or m = 0) is widened to value ± max(|value|/10, 1e-30)
/// for sequential and to [-1, 1] when m = 0. Throws std::invalid_argument
/// when VALUES holds no finite value.
ValueRange robust_range(const std::vector<double>& values, ColourScale scale);

/// What to read for a map.
struct MapRequest {
  std::string field;     ///< variable name; "" = `speed` when the file has it, else the height
  std::size_t time = 0;  ///< time index (0-based); 0 for a file without time
  bool arrows = false;   ///< also read u and v (m s-1) for current arrows
  /// Read FIELD as the height through seatilt::Reader even without a CF
  /// sea-surface-height standard_name (as `currents --variable` does); with
  /// an empty FIELD the height is detected (never `speed`). For a `run` job
  /// drawing its own input.
  bool as_height = false;
  /// Heights: override of the units (as `currents --units`); "" = from the file.
  std::string units;
};

/// One field of one time step, ready to draw.
struct MapData {
  std::string path;       ///< file as given
  std::string variable;   ///< drawn variable
  std::string long_name;  ///< its long_name (the variable name when absent)
  std::string units;      ///< units of `values` ("m" for heights read by the Reader)
  ColourScale scale = ColourScale::sequential;  ///< colour map chosen for it
  std::vector<double> lat_deg, lon_deg;         ///< coordinates in file order (degrees)
  Field values;                                 ///< ny x nx in file order, NaN where missing
  Field u, v;               ///< with MapRequest::arrows: eastward, northward velocity; else empty
  std::string arrow_units;  ///< units of u ("" without arrows)
  std::size_t time_index = 0, time_steps = 1;
  std::string date;  ///< ISO 8601 date of the step; "" without time or when undecodable
  /// How cells are placed. lat_lon: lat_deg/lon_deg hold the 1-D coordinates.
  /// projected/curvilinear: lat_deg/lon_deg are empty and `plane` holds the
  /// node positions, grid coordinates (x/y in metres, or indices) and metric.
  GridKind grid_kind = GridKind::lat_lon;
  std::shared_ptr<const CurvilinearGrid> plane;  ///< null for lat_lon
  std::string grid_name;  ///< the grid mapping's name ("polar_stereographic") or "curvilinear"
};

/// Reads the field of REQUEST from PATH.
/// Field choice: REQUEST.field, else `speed` when the file has that
/// variable, else the height variable detected by seatilt::Reader. Grids:
/// 1-D latitude/longitude, or (like `currents`) projected x/y with a CF
/// grid_mapping and 2-D latitude/longitude named by `coordinates`; the grid
/// of a non-height variable is found by the Reader's rules; node positions
/// and metric come from make_curvilinear_grid (tiling.hpp; WGS84 for 2-D
/// latitude/longitude). A field whose standard_name starts with
/// "sea_surface_height" (or the detected height) is read through the Reader
/// (metres); others with netCDF-C, in the file's units (REQUEST.as_height:
/// through the Reader with REQUEST.units). Colour map: diverging for a sea
/// level anomaly and for u, v, vorticity, strain_normal, strain_shear, okubo_weiss (also when the
/// standard_name names an eastward/northward velocity or a vorticity);
/// sequential for absolute heights, speed and strain; otherwise diverging
/// when the 2nd and 98th percentiles have opposite signs.
/// Throws InputError ("PATH: variable V: problem") when the file cannot be
/// read, the variable is missing (the message lists the drawable ones), its
/// layout is not (..., lat, lon) with lat/lon CF coordinates nor a projected
/// or curvilinear grid, a coordinate is not monotonic, the grid mapping is
/// unknown or inconsistent, u or v do not share the field's grid, or every
/// cell of the step is missing; UsageError when REQUEST.time is beyond the
/// last step, the field is a flag variable (flag_masks/flag_values), or
/// arrows are requested from a file without u and v.
MapData read_map_data(const std::string& path, const MapRequest& request);

/// A map region in degrees. lon0 < lon1 <= lon0 + 360 (lon1 may exceed 180
/// or 360 for a region crossing the seam); -90 <= lat0 < lat1 <= 90.
struct Region {
  double lon0 = 0.0, lon1 = 0.0, lat0 = 0.0, lat1 = 0.0;
};

/// Parses "LON0,LON1,LAT0,LAT1" (degrees east/north). When LON1 <= LON0 the
/// region runs east across the seam and 360 is added to LON1 (e.g.
/// "170,-170,..." is 170..190). Throws UsageError for a malformed text,
/// non-finite numbers, LON0 == LON1, |lon| > 360, latitudes outside -90..90
/// or LAT0 >= LAT1.
Region parse_region(const std::string& text);

/// Parses "A,B" with A < B, both finite. Throws UsageError otherwise.
ValueRange parse_range(const std::string& text);

/// How to draw.
struct QuicklookOptions {
  std::optional<Region> region;     ///< default: the extent of the grid cells
  std::optional<ValueRange> range;  ///< default: robust_range of the cells in the map
  bool arrows = false;              ///< draw u, v arrows (MapData::u, v must be filled)
  int width_px = 1000;              ///< PNG width, 320..4096; the height follows the map
  bool force = false;               ///< replace an existing PNG
};

/// A rectangle of pixels; x to the right, y downward from the top-left corner.
struct PixelBox {
  int x = 0, y = 0, width = 0, height = 0;
};

/// The part of a projected or curvilinear grid drawn: grid coordinates at
/// the left/right (c) and bottom/top (r) edges of the map; x/y in metres for
/// a projected grid; for 2-D latitude/longitude the column/row indices, each
/// negated when the grid is drawn flipped (columns running west, or rows
/// running south, at the centre node), so that east is right and north up.
struct GridWindow {
  double c0 = 0.0, c1 = 0.0;  ///< left, right edge (c0 < c1)
  double r0 = 0.0, r1 = 0.0;  ///< bottom, top edge (r0 < r1)
};

/// One current arrow as drawn.
struct DrawnArrow {
  double x = 0.0, y = 0.0;    ///< centre (pixels)
  double dx = 0.0, dy = 0.0;  ///< unit direction on the page (x right, y down)
  double speed = 0.0;         ///< sqrt(u^2 + v^2) (units of u)
};

/// What was drawn, for messages and tests.
struct QuicklookResult {
  int width_px = 0, height_px = 0;  ///< PNG size
  PixelBox map;                     ///< the map cells (inside the frame)
  PixelBox colour_bar;              ///< the colour gradient of the colour bar
  Region region;                    ///< region drawn (longitudes as used for the x axis)
  ColourScale scale = ColourScale::sequential;
  ValueRange range;  ///< colour range (field units)
  bool range_from_percentiles = true;
  double arrow_reference = 0.0;  ///< speed of the legend arrow (u units); 0 without arrows
  std::size_t arrow_count = 0;   ///< arrows drawn
  bool ascii_text = false;       ///< no font found: Cairo's built-in font, ASCII labels
  std::vector<DrawnArrow> arrows;          ///< the arrows drawn (arrow_count of them)
  GridKind grid_kind = GridKind::lat_lon;  ///< as MapData::grid_kind
  /// Projected/curvilinear maps: the window drawn. `region` then holds the
  /// latitude/longitude range of the nodes in the window (for messages).
  GridWindow window;
  std::size_t graticule_labels = 0;  ///< graticule labels written
};

/// Returns the longitude/latitude (degrees) at the centre of pixel (PX, PY)
/// of a latitude-longitude map drawn as RESULT, or NaN for both outside
/// RESULT.map or on a projected/curvilinear map (see pixel_to_grid).
/// Longitudes follow RESULT.region (may exceed 180 or 360).
void pixel_to_lonlat(const QuicklookResult& result, int px, int py, double& lon_deg,
                     double& lat_deg);

/// Returns the grid coordinates (C, R as in GridWindow) at the centre of
/// pixel (PX, PY) of a projected/curvilinear map, NaN outside RESULT.map.
void pixel_to_grid(const QuicklookResult& result, int px, int py, double& c, double& r);

/// Returns the pixel (column, row) holding grid coordinates (C, R) on a
/// projected/curvilinear map; it may lie outside RESULT.map.
void grid_to_pixel(const QuicklookResult& result, double c, double r, int& px, int& py);

/// Returns the pixel (column, row) whose centre is nearest to (LON_DEG,
/// LAT_DEG) on a map drawn as RESULT; LON_DEG is first shifted by multiples
/// of 360 into the region. The pixel may lie outside RESULT.map.
void lonlat_to_pixel(const QuicklookResult& result, double lon_deg, double lat_deg, int& px,
                     int& py);

/// Draws MAP as a PNG at PNG_PATH: written under a hidden temporary name
/// (".<name>.tmp-<pid>-<random>") in the same folder, then renamed.
/// On a projected or curvilinear grid, OPTIONS.region selects the smallest
/// rectangle of grid cells (in grid coordinates) holding every cell whose
/// centre lies in the latitude/longitude box; all cells of that rectangle
/// are drawn.
/// Throws UsageError for a width outside 320..4096, arrows without u/v in
/// MAP, or a region that does not overlap the grid (projected/curvilinear:
/// no cell centre inside); InputError when the region holds no finite value
/// and MAP holds none either;
/// OutputError ("PNG_PATH: problem") when PNG_PATH exists and !force, is a
/// folder, is the input file, its folder is missing or not writable, or
/// writing fails (the temporary file is removed; an existing PNG is untouched).
QuicklookResult write_quicklook(const MapData& map, const QuicklookOptions& options,
                                const std::string& png_path);

}  // namespace seatilt
