// seatilt/inmemory.hpp — the `currents` computation on heights held in memory.
//
// Owns: computing the `currents` fields of height maps that the caller holds
// in memory (numpy arrays and xarray datasets through the Python module in
// python/, docs/python.md) with the same kernel, diagnostics, quality flags
// and fill rules as the file pipeline (tiling.hpp), so that the values equal
// the file output's bit for bit; the shared `currents` option values given
// as text, with the command line's messages; and the reader's CF rules
// (reader.hpp) applied to metadata held in memory: choice of the height
// variable, its kind, latitude/longitude/time coordinates, units to metres,
// packing and missing values. Does not own any formula (kernel.hpp,
// diagnostics.hpp), file I/O, or anything Python-specific.
//
// Method: for each time step, row bands of heights with the halos of the
// velocity and diagnostic stencils (as in tiling.cpp) are read from the
// caller's strided array, unpacked to metres by the reader's rule
//   metres = (value * scale_factor + add_offset) * to_metres_scale + to_metres_offset
// (NaN where missing), passed through GeostrophicKernel and KinematicsKernel,
// and each output row is stored as the file holds it: float32 rounded by the
// writer's rule (writer.hpp output_float), with NaN where the file holds
// _FillValue; or, on request, as the unrounded doubles. Every output cell
// depends only on input cells, never on the band or thread layout
// (tiling.hpp "Determinism"), which is what makes the values equal.
//
// References
//  [1] CF Conventions 1.12: 2.5.1 (_FillValue, missing_value, valid_*),
//      3.3 (standard names), 4.1-4.4 (coordinates, time), 8.1 (packed data).
//  [2] UDUNITS-2 2.2.28 C API (ut_parse, ut_are_convertible, ut_get_converter).
//  [3] netCDF-C 4.9 netcdf.h (default fill values NC_FILL_*); NUG "Attribute
//      Conventions" (_Unsigned).
//
// Accuracy: that of the kernels (kernel.hpp); float32 output is the double
// result rounded to nearest, as in the file.
//
// Threads: compute_currents runs the kernels on THREADS OpenMP threads of
// the calling thread and restores the thread count afterwards; it makes no
// netCDF call and holds no global state, so several calls may run at once.
#pragma once

#include <cstddef>
#include <cstdint>
#include <map>
#include <optional>
#include <string>
#include <vector>

#include "seatilt/chunkio.hpp"
#include "seatilt/grid.hpp"
#include "seatilt/kernel.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/tiling.hpp"

namespace seatilt {

// ---- options --------------------------------------------------------------------

/// The shared `currents` options as text, as given on the command line
/// (--order, --equator, --equator-band, --coast, --earth, --gravity) or as
/// Python keywords.
struct CurrentsOptionText {
  int order = 2;                      ///< 2, 4 or 6
  std::string equator = "blend";      ///< mask, beta, blend
  double equator_band_deg = 5.0;      ///< 0..30 (degrees)
  std::string coast = "one-sided";    ///< one-sided, mask
  std::string earth = "wgs84";        ///< sphere, wgs84
  std::string gravity = "standard";   ///< standard, wgs84, or a number in m s-2 (0.1..100)
};

/// Resolves and checks TEXT. Throws UsageError with the command line's text,
/// e.g. "--equator: 'x' is not one of mask, beta, blend" or
/// "--order: 3 is not one of 2, 4, 6".
CurrentsOptions currents_options_from_text(const CurrentsOptionText& text);

// ---- CF metadata held in memory (the reader's rules, reader.hpp) -------------------

/// What a CF standard_name says about a height variable [1] 3.3.
enum class HeightStandardName {
  none,       ///< not a sea-surface-height name
  absolute,   ///< sea_surface_height_above_geoid, ..._above_geopotential_datum
  anomaly,    ///< ..._above_mean_sea_level, ..._above_sea_level, sea_surface_height
  ellipsoid,  ///< sea_surface_height_above_reference_ellipsoid (refused)
};

/// Classifies STANDARD_NAME (surrounding blanks ignored).
HeightStandardName classify_height_standard_name(const std::string& standard_name);

/// Role of a 1-D coordinate variable [1] 4.1-4.4.
enum class CoordinateAxis { none, latitude, longitude, time };

/// Classifies a coordinate by its attributes, as the reader does: latitude
/// for units degrees_north (and the CF spellings degree_north, degree_N,
/// degrees_N, degreeN, degreesN, any case), standard_name latitude, or axis Y
/// with degree units; likewise longitude; time for standard_name time, axis T
/// or units "<unit> since <date>".
CoordinateAxis classify_coordinate(const std::string& units, const std::string& standard_name,
                                   const std::string& axis);

/// Returns true when TEXT says "anomaly" (any case, also "anomalies") or has
/// the word "sla": the reader's rule for a height variable without a CF
/// height standard_name.
bool says_anomaly(const std::string& text);

/// Finds metres = value * SCALE + OFFSET for a length in UNITS with UDUNITS-2
/// [2]. Returns false, leaving SCALE and OFFSET alone, when UNITS cannot be
/// parsed or is not a length; WHY then says which ("not understood by
/// UDUNITS-2" or "not a length"). Throws InputError when the unit database
/// cannot be read. Thread-safe.
bool length_units_to_metres(const std::string& units, double& scale, double& offset,
                            std::string& why);

/// One variable of a dataset held in memory (an xarray Dataset, ...).
struct VariableDescription {
  std::string name;
  std::vector<std::string> dims;    ///< dimension names, in order
  std::vector<std::size_t> shape;   ///< same length as dims
  bool numeric = true;              ///< integer or floating-point values
  bool decoded_time = false;        ///< values already decoded to dates (a time coordinate)
  std::map<std::string, std::string> text;  ///< text attributes (standard_name, units, axis, long_name, ...)
};

/// The reader's decisions about a dataset held in memory.
struct DatasetLayout {
  std::size_t height = 0;           ///< index of the height variable
  std::string chosen_because;       ///< "standard_name ...", "variable=" or "the DataArray given"
  HeightKind kind = HeightKind::absolute;
  std::string kind_reason;
  std::size_t lat = 0, lon = 0;     ///< indices of the latitude and longitude coordinates
  std::optional<std::size_t> time;  ///< index of the time coordinate, when the variable has time
  std::size_t lat_dim = 0, lon_dim = 0;  ///< positions of those dimensions in the height variable
  std::optional<std::size_t> time_dim;   ///< position of the time dimension
  std::string units;                ///< height units, as found or as given
  bool units_overridden = false;
  double to_metres_scale = 1.0, to_metres_offset = 0.0;
};

/// Applies the reader's rules (reader.hpp "Detection order", "Coordinates")
/// to VARS: the variable named VARIABLE ("" = the one with a CF
/// sea-surface-height standard_name; ellipsoidal heights refused), its kind
/// (standard_name, else "anomaly"/"sla" in its name or long_name), the
/// coordinate of each of its dimensions (the 1-D variable on that dimension
/// that classify_coordinate recognises, preferring the one named like the
/// dimension), the layouts (lat, lon) and (time, lat, lon) with other
/// dimensions only of size 1, and its units (UNITS overrides) converted to
/// metres. GIVEN_BECAUSE, when not empty, replaces "variable=" as the reason
/// of the choice. Throws InputError "SOURCE: variable V: problem" naming the
/// candidates, dimensions or units at fault; messages name the Python
/// keywords variable= and units= where the reader names --variable and --units.
DatasetLayout describe_dataset(const std::vector<VariableDescription>& vars,
                               const std::string& variable, const std::string& units,
                               const std::string& source, const std::string& given_because = "");

// ---- values ---------------------------------------------------------------------

/// How stored values become heights in metres, by the reader's rule: a value
/// is missing when it is not finite, outside [valid_min, valid_max], equal to
/// fill_value or to one of missing_values (all in stored units, after the
/// _Unsigned reinterpretation); otherwise
///   metres = (value * scale_factor + add_offset) * to_metres_scale + to_metres_offset   [1] 8.1
/// The defaults leave values alone (NaN stays missing).
struct Unpacking {
  double scale_factor = 1.0, add_offset = 0.0;
  double to_metres_scale = 1.0, to_metres_offset = 0.0;
  std::optional<double> fill_value;
  std::vector<double> missing_values;
  std::optional<double> valid_min, valid_max;
  /// Signed integer storage holding unsigned data (_Unsigned = "true"):
  /// negative values get 2^bits added.
  bool unsigned_data = false;
};

/// A numeric attribute held in memory: its values and element type.
struct NumberAttribute {
  std::string name;
  chunkio::ElementType type = chunkio::ElementType::f64;
  std::vector<double> values;
};

/// Builds the Unpacking of values stored as STORAGE from the attributes of
/// the height variable, by the reader's rules (reader.hpp): scale_factor,
/// add_offset, _FillValue (without it, the netCDF default fill of STORAGE
/// [3], none for bytes), missing_value, valid_range or valid_min/valid_max;
/// attribute values of STORAGE's type follow the _Unsigned reinterpretation
/// (UNSIGNED_DATA, ignored unless STORAGE is a signed integer), and float
/// storage compares at float precision. TO_METRES_SCALE and OFFSET come from
/// describe_dataset. Throws InputError "SOURCE: variable VARIABLE: problem"
/// for a scale_factor/add_offset that is not finite and non-zero, a
/// valid_range without two values, or a valid minimum above the maximum.
Unpacking unpacking_from_attributes(chunkio::ElementType storage,
                                    const std::vector<NumberAttribute>& attrs, bool unsigned_data,
                                    double to_metres_scale, double to_metres_offset,
                                    const std::string& source, const std::string& variable);

/// A strided view of heights owned by the caller: NT x NY x NX values (time
/// step, row = latitude index in GRID order, column = longitude index).
struct HeightArray {
  const void* data = nullptr;
  chunkio::ElementType type = chunkio::ElementType::f64;  ///< native byte order
  std::size_t nt = 1, ny = 0, nx = 0;
  std::ptrdiff_t strides[3] = {0, 0, 0};  ///< bytes between neighbours along time, row, column
  /// Optional mask of the same shape, one byte per cell, nonzero = missing
  /// (a numpy bool array); null = none.
  const void* mask = nullptr;
  std::ptrdiff_t mask_strides[3] = {0, 0, 0};
};

/// Output arrays owned by the caller.
struct CurrentsArrays {
  std::vector<std::string> fields;  ///< from parse_field_list ("quality" included)
  bool float64 = false;             ///< unrounded doubles instead of float32
  /// One pointer per field: NT x NY x NX contiguous row-major elements of
  /// float (or double with float64) for the float fields, std::int8_t for
  /// "quality" (the file's NC_BYTE bits, 0..127).
  std::vector<void*> data;
};

/// Builds the latitude-longitude grid of an in-memory map from LAT_DEG and
/// LON_DEG (degrees, as Grid). Throws InputError "SOURCE: variable VARIABLE:
/// problem" (empty parts left out) where Grid throws std::invalid_argument
/// (fewer than 2 points, non-finite, not strictly monotonic, |lat| > 90,
/// longitudes spanning 360 degrees or more).
Grid make_memory_grid(std::vector<double> lat_deg, std::vector<double> lon_deg,
                      const std::string& source, const std::string& variable);

/// Computes OUT.fields for every time step of HEIGHTS on GRID with OPTIONS,
/// on THREADS OpenMP threads (0 = omp_get_max_threads()). Cells that the
/// file marks _FillValue are NaN; quality always has a value. Returns the
/// counts of the run (read_path/write_path "memory"). Throws UsageError for
/// invalid OPTIONS, THREADS < 0 or an unknown field (the command line's
/// messages); InputError "SOURCE: variable VARIABLE: problem" (the empty
/// parts left out) when the shape of HEIGHTS does not match GRID or a time
/// step has every cell missing (then OUT is partly written);
/// std::invalid_argument when OUT does not hold one non-null array per field.
CurrentsSummary compute_currents(const HeightArray& heights, const Unpacking& unpacking,
                                 const Grid& grid, const CurrentsOptions& options,
                                 const CurrentsArrays& out, int threads,
                                 const std::string& source, const std::string& variable);

}  // namespace seatilt
