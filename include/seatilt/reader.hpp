// seatilt/reader.hpp — netCDF sea-surface-height input.
//
// Owns: opening a netCDF file (classic, 64-bit offset, netCDF-4/HDF5),
// detecting the height variable and its latitude/longitude/time coordinates
// by CF rules, unpacking (scale_factor, add_offset), honouring _FillValue,
// missing_value, valid_min/valid_max/valid_range, converting heights to
// metres with UDUNITS-2, and decoding CF time to calendar dates. Hands out
// rows of one time step as doubles in metres with NaN for missing cells, in
// the file's own row/column order. Does not own metric terms (grid.hpp) or
// any arithmetic beyond unpacking and unit conversion.
//
// Detection order for the height variable:
//   1. --variable NAME (error if absent);
//   2. the one variable whose standard_name is a CF sea-surface-height name:
//        sea_surface_height_above_geoid                 -> absolute
//        sea_surface_height_above_geopotential_datum    -> absolute
//        sea_surface_height_above_mean_sea_level        -> anomaly
//        sea_surface_height_above_sea_level, sea_surface_height -> anomaly
//      sea_surface_height_above_reference_ellipsoid is refused (it includes the
//      geoid, ~±100 m, so its slopes are not geostrophic);
//   3. otherwise an InputError listing the candidates (2-D/3-D float-or-integer
//      variables on the lat/lon dimensions) or saying that there are none.
// A variable chosen by --variable without a CF height standard_name is
// treated as an anomaly when its name or long_name says "anomaly"/"sla",
// otherwise as absolute; the reason is recorded in HeightInfo::kind_reason.
//
// Projected and curvilinear grids (ReaderOptions::horizontal_grids; see
// docs/projected.md): without 1-D latitude/longitude, the last two dimensions
// may carry 1-D projection x/y (standard_name projection_x/y_coordinate, or
// axis X/Y with a length unit; converted to metres) with the variable's
// grid_mapping attribute naming a grid mapping variable (also the CF 1.7
// extended form "crs: x y"), or 2-D latitude/longitude on (rows, columns)
// named by its coordinates attribute. x/y without a grid mapping and without
// 2-D latitude/longitude, a grid_mapping naming no variable, or x and y in
// different units are InputErrors.
//
// Coordinates: a 1-D variable is latitude when its units are degrees_north
// (or degree_north, degree_N, degrees_N, degreeN, degreesN), or its
// standard_name is "latitude", or axis="Y" with degree units; likewise
// longitude with degrees_east / "longitude" / axis="X". Time: standard_name
// "time" or axis="T" or units "<unit> since <date>". Accepted layouts of the
// height variable: (lat, lon) and (time, lat, lon); any other order or any
// other dimension of size > 1 is an InputError naming the dimensions. Extra
// leading dimensions of size 1 (e.g. depth=1) are accepted and dropped.
//
// References
//  [1] CF Conventions 1.12, sections 3.3 (standard names), 3.5 (flags),
//      4.1-4.4 (coordinates, time, calendars), 8.1 (packed data), 2.5.1
//      (missing data: _FillValue, missing_value, valid_*).
//  [2] UDUNITS-2 2.2.28 C API (ut_read_xml, ut_parse, ut_get_converter).
//
// Thread safety: netCDF-C is not thread-safe; use one Reader from one
// thread at a time. UDUNITS parsing is serialised internally.
#pragma once

#include <cstddef>
#include <memory>
#include <optional>
#include <string>
#include <variant>
#include <vector>

#include "seatilt/grid.hpp"
#include "seatilt/resources.hpp"  // require_memory: the reader and every command that holds grids

namespace seatilt {

/// A netCDF attribute, copied so that the writer can reproduce it.
struct Attribute {
  std::string name;
  int nc_type = 0;  ///< NC_CHAR/NC_STRING for text, else the numeric nc_type
  std::string text;            ///< when nc_type is NC_CHAR or NC_STRING (string arrays joined with ", ")
  std::vector<double> values;  ///< numeric values otherwise (exact for all but 64-bit ints > 2^53)
};

/// A 1-D coordinate variable with its attributes.
struct CoordVar {
  std::string name;   ///< variable name in the file
  std::string dim;    ///< its dimension name
  int nc_type = 0;    ///< storage type in the file (NC_FLOAT, NC_DOUBLE, ...)
  std::vector<double> values;  ///< unpacked values
  std::vector<Attribute> attrs;
};

/// A variable reproduced in the output besides the coordinates: a CF grid
/// mapping variable (scalar, no values) or a 2-D auxiliary coordinate.
struct AuxVar {
  std::string name;
  int nc_type = 0;  ///< storage type in the file
  std::vector<double>
      values;  ///< unpacked, rows x columns row-major, NaN missing; empty for a grid mapping
  std::vector<Attribute> attrs;
};

/// How the horizontal position of a cell is given (docs/projected.md).
enum class GridKind {
  lat_lon,      ///< 1-D latitude and longitude coordinates
  projected,    ///< 1-D projection x/y with a CF grid mapping (CF 1.12 5.6, Appendix F)
  curvilinear,  ///< 2-D latitude/longitude named by the coordinates attribute (CF 5.2)
};

/// Whether heights are absolute (above the geoid) or an anomaly (above a mean sea level).
enum class HeightKind { absolute, anomaly };

/// A date and time decoded from a CF time value (calendar-aware).
struct CivilTime {
  int year = 0, month = 1, day = 1, hour = 0, minute = 0;
  double second = 0.0;
  /// Formats as ISO 8601 "YYYY-MM-DDThh:mm:ssZ" (seconds rounded to 1 s,
  /// carrying into minutes and hours; within half a second before midnight
  /// the seconds are cut instead, since a day carry needs the calendar).
  /// Negative years print with a leading "-" ("-0001-12-31T00:00:00Z").
  [[nodiscard]] std::string iso() const;
};

/// Everything the reader found out about an input, before any data is read.
struct HeightInfo {
  std::string path;            ///< file as given
  std::string format;          ///< "netCDF-4", "netCDF-4 classic model", "classic", "64-bit offset", "CDF5"
  std::string variable;        ///< chosen height variable
  std::string chosen_because;  ///< e.g. "standard_name sea_surface_height_above_geoid" or "--variable"
  HeightKind kind = HeightKind::absolute;
  std::string kind_reason;     ///< why absolute/anomaly
  std::string standard_name;   ///< of the height variable ("" when absent)
  std::string long_name;
  std::string units;           ///< units as found (or as overridden)
  bool units_overridden = false;
  double to_metres_scale = 1.0;   ///< metres = value * scale + offset (UDUNITS converter)
  double to_metres_offset = 0.0;
  bool packed = false;            ///< scale_factor/add_offset present
  double scale_factor = 1.0, add_offset = 0.0;
  int storage_type = 0;           ///< nc_type of the stored variable
  /// _FillValue (packed units); without the attribute, the netCDF default
  /// fill of the storage type (netcdf.h NC_FILL_*; none for byte types).
  std::optional<double> fill_value;
  std::vector<double> missing_values;     ///< missing_value (packed units)
  std::optional<double> valid_min, valid_max;  ///< packed units
  CoordVar lat, lon;
  std::optional<CoordVar> time;   ///< present when the variable has a time dimension
  std::string calendar;           ///< CF calendar of time ("standard" when absent)
  std::size_t nt = 1, ny = 0, nx = 0;  ///< nt = 1 without time
  std::vector<Attribute> global_attrs;
  std::vector<Attribute> variable_attrs;  ///< of the height variable

  // ---- projected and curvilinear grids (only with ReaderOptions::horizontal_grids) ----
  // For these, lat holds the row (y) and lon the column (x) coordinate
  // variable as in the file; a dimension without one gets name "" and values
  // 0..n-1 (the writer then defines the dimension only).
  GridKind grid_kind = GridKind::lat_lon;
  std::vector<double> x_m, y_m;            ///< projected: x (nx) and y (ny) in metres
  std::optional<AuxVar> grid_mapping_var;  ///< projected: the grid mapping variable
  GridMapping grid_mapping;  ///< projected: its attributes (grid.hpp), unit_m from x's units
  std::optional<AuxVar> lat2d, lon2d;  ///< 2-D latitude/longitude (degrees) when the file has them
};

/// Options given to the reader from the command line or a job file.
struct ReaderOptions {
  std::string variable;  ///< --variable ("" = detect)
  std::string units;     ///< --units ("" = from the file)
  /// Accept projected x/y grids with a CF grid_mapping and curvilinear grids
  /// with 2-D latitude/longitude when no 1-D latitude/longitude exist
  /// (HeightInfo::grid_kind); false refuses them as before.
  bool horizontal_grids = false;
  /// Read netCDF-4 chunks raw (H5Dread_chunk) and decompress them in seatilt,
  /// in parallel, where the layout allows (chunked; filters [shuffle]
  /// [deflate] or none; integer or IEEE float storage); false = always
  /// nc_get_vara. Values are identical either way (tested).
  bool raw_chunks = true;
};

/// Rows of one time step fetched from the file by Reader::fetch_rows and not
/// yet decoded: stored chunks (raw path) or values (nc_get_vara path).
/// Move-only; holds no netCDF or HDF5 handle.
class FetchedRows {
public:
  FetchedRows();
  ~FetchedRows();
  FetchedRows(FetchedRows&&) noexcept;
  FetchedRows& operator=(FetchedRows&&) noexcept;
  FetchedRows(const FetchedRows&) = delete;
  FetchedRows& operator=(const FetchedRows&) = delete;

  /// Independent decoding tasks (one per input chunk to decompress; 0 on the
  /// nc_get_vara path). Run each once, on any threads, concurrently if
  /// wished, before Reader::unpack_rows. Throws InputError for corrupt data.
  [[nodiscard]] std::size_t tasks() const;
  void run_task(std::size_t k) const;
  [[nodiscard]] std::size_t rows() const;  ///< rows fetched
  [[nodiscard]] std::size_t first_row() const;  ///< global index of the first row

private:
  friend class Reader;
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

/// Reads heights from one netCDF file. Move-only; closes the file on destruction.
class Reader {
public:
  /// Opens PATH and detects variable, coordinates, units and packing.
  /// Throws InputError ("PATH: variable V: problem") when the file cannot be
  /// opened (missing, truncated, not netCDF), no or several candidate height
  /// variables exist, the standard_name is the ellipsoidal height, units are
  /// missing/unparsable/not a length, coordinates are missing, non-monotonic
  /// or non-finite, or the layout is unsupported, or when holding the
  /// declared coordinates would exceed the available memory (resources.hpp).
  /// Problems quoting text from the file show control bytes and invalid
  /// UTF-8 as '?', so that the message stays one printable line.
  Reader(const std::string& path, const ReaderOptions& options);
  /// Opens the netCDF file held in memory as the SIZE bytes at DATA (copied;
  /// netCDF-C nc_open_mem), named NAME in messages, with the same detection
  /// and the same errors as the constructor. Heights are read through
  /// netCDF-C (raw chunk reads need a file on disk). Throws InputError also
  /// for SIZE = 0.
  static Reader from_memory(const std::string& name, const void* data, std::size_t size,
                            const ReaderOptions& options);
  ~Reader();
  Reader(Reader&&) noexcept;
  Reader& operator=(Reader&&) noexcept;
  Reader(const Reader&) = delete;
  Reader& operator=(const Reader&) = delete;

  /// Returns what was detected.
  [[nodiscard]] const HeightInfo& info() const;

  /// Reads rows [j0, j0+nrows) of time step t (t = 0 without time) into
  /// OUT (resized to nrows x nx): metres, NaN where missing (fill,
  /// missing_value, outside valid range, or NaN/Inf in the file).
  /// Throws InputError on a netCDF read failure (e.g. truncated data), when
  /// a netCDF-4 height variable holds no data at all (nothing was ever
  /// written: every cell would be missing), and when the file was modified in
  /// place (size or modification time changed) since it was opened — a file
  /// replaced by a rename is still read from the copy that was opened;
  /// std::out_of_range when t >= nt or the rows exceed ny (a caller bug).
  /// nrows = 0 gives an empty OUT.
  void read_rows(std::size_t t, std::size_t j0, std::size_t nrows, Field& out);

  /// read_rows in two halves for pipelines that keep every netCDF/HDF5 call
  /// on one thread: fetch_rows makes the library calls (on the Reader's
  /// thread); FetchedRows::run_task and unpack_rows make none and may run on
  /// other threads while the Reader fetches the next rows. Rows must be
  /// decoded (all tasks run) in the order they were fetched, since chunks
  /// shared by overlapping fetches are decoded once, by the first.
  /// fetch_rows throws like read_rows.
  void fetch_rows(std::size_t t, std::size_t j0, std::size_t nrows, FetchedRows& out);
  /// Writes fetched rows [r0, r1) (0 <= r0 <= r1 <= in.rows()) into the same
  /// rows of OUT, which must be in.rows() x nx: metres, NaN where missing,
  /// exactly as read_rows. Thread-safe for disjoint row ranges.
  void unpack_rows(const FetchedRows& in, std::size_t r0, std::size_t r1, Field& out) const;

  /// How heights are read: "raw chunks (shuffle+deflate)" or "netCDF-C (<reason>)".
  [[nodiscard]] const std::string& read_path() const;

  /// Returns the calendar date of time step t; throws InputError for an
  /// unknown calendar or undecodable units. Without time, throws InputError;
  /// std::out_of_range when t >= nt.
  [[nodiscard]] CivilTime date(std::size_t t) const;

private:
  Reader();
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

/// Decodes a CF time value: VALUE in UNITS ("<unit> since <date>") on CALENDAR
/// (standard/gregorian, proleptic_gregorian, julian, noleap/365_day,
/// all_leap/366_day, 360_day; "" = standard). The standard calendar is
/// Julian up to 1582-10-04 and Gregorian from 1582-10-15. <unit> is seconds,
/// minutes, hours or days (also s, sec, min, h, hr, d and plurals); <date> is
/// "Y-M-D", optionally followed by " " or "T" and "h[:m[:s[.f]]]", and by
/// "Z", "UTC" or an offset "+hh:mm"/"-hh"/"+hhmm" (local = UTC + offset).
/// Years follow CF 1.9+ and cftime: standard and julian have no year 0 (the
/// year before 1 is -1), the other calendars do. Resolution 1 microsecond.
/// Throws std::invalid_argument for months or years as units (ambiguous,
/// CF 4.4), dates that do not exist in the calendar (1582-10-10 standard,
/// 02-29 in noleap), a non-finite value, and anything else not listed.
CivilTime decode_cf_time(double value, const std::string& units, const std::string& calendar);

}  // namespace seatilt
