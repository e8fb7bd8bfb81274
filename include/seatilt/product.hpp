// seatilt/product.hpp — names and CF metadata of the `currents` outputs.
//
// Owns: the catalogue of output variables (name, CF standard_name, long_name,
// units, ACDD coverage_content_type), the quality flag attributes, and the
// global attributes (CF-1.12 + ACDD-1.3, settings used, the caution about
// what geostrophic currents are not). Split from writer.hpp so that the
// writer stays generic (it also writes climatologies later) and adding an
// output field touches one table here plus its computation in diagnostics.
//
// References
//  [1] CF Standard Name Table v83 (2023-10-17).
//  [2] CF Conventions 1.12, 3.5 (flag_masks, flag_meanings).
//  [3] ACDD 1.3 (Attribute Convention for Data Discovery).
#pragma once

#include <string>
#include <vector>

#include "seatilt/kernel.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/writer.hpp"

namespace seatilt {

/// Names of every `currents` output field, in output order ("quality" last).
const std::vector<std::string>& currents_field_names();

/// Parses a comma list of field names ("" or "all" = every field); quality is
/// always included. Throws UsageError naming an unknown field.
std::vector<std::string> parse_field_list(const std::string& list);

/// Returns the output variable definitions for FIELDS (from parse_field_list)
/// with standard names chosen by KIND (anomaly -> *_assuming_mean_sea_level_for_geoid).
std::vector<OutputVariable> currents_variables(const std::vector<std::string>& fields,
                                               HeightKind kind);

/// The caution written into README-like places and the output `comment`.
const char* currents_caution();

/// Returns the global attributes of a `currents` output.
std::vector<Attribute> currents_global_attributes(const HeightInfo& input,
                                                  const CurrentsOptions& options,
                                                  const std::string& command_line);

/// Text attribute helper.
Attribute text_attribute(const std::string& name, const std::string& value);
/// Numeric attribute helper (NC type given, e.g. NC_DOUBLE, NC_INT, NC_BYTE).
Attribute number_attribute(const std::string& name, int nc_type, std::vector<double> values);

/// Option value names as written in metadata and accepted on the command line.
const char* to_string(EquatorMethod m);
const char* to_string(CoastMethod m);
const char* to_string(EarthModel m);
std::string gravity_description(const CurrentsOptions& o);

/// Parse the option names written by to_string() (and "standard"/"wgs84" for
/// gravity) into OUT; return false, leaving OUT alone, for any other text.
/// Every command and the job-file parser share these, each wording its own error.
bool parse_equator(const std::string& text, EquatorMethod& out);
bool parse_coast(const std::string& text, CoastMethod& out);
bool parse_earth(const std::string& text, EarthModel& out);
bool parse_gravity_name(const std::string& text, GravityModel& out);

}  // namespace seatilt
