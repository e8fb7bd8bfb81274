// python/module.cpp — the extension module `seatilt._seatilt` (pybind11).
//
// A thin layer: converts numpy arrays and Python values to the library's
// types and back, releases the GIL around the computation, and maps the
// library's errors to Python exceptions (UsageError and InputError, both
// subclasses of ValueError). Every number comes from the library
// (inmemory.hpp -> kernel.hpp, diagnostics.hpp); every name and attribute of
// the outputs from the product catalogue (product.hpp). The Python package
// (python/seatilt/) adds the keyword interface and the xarray layer.
#include <netcdf.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <cstring>
#include <string>
#include <vector>

#include "seatilt/error.hpp"
#include "seatilt/inmemory.hpp"
#include "seatilt/kernel.hpp"
#include "seatilt/product.hpp"
#include "seatilt/version.hpp"

namespace py = pybind11;

namespace seatilt {
namespace {

using chunkio::ElementType;

/// InputError "SOURCE: variable VARIABLE: PROBLEM" without the empty parts
/// (as inmemory.cpp words its messages).
InputError input_error(const std::string& source, const std::string& variable,
                       const std::string& problem) {
  if (!source.empty()) return InputError(input_message(source, variable, problem));
  return InputError(variable.empty() ? problem : "variable " + variable + ": " + problem);
}

/// The element type of a numpy array in native byte order; TypeError otherwise.
ElementType element_type(const py::array& a, const char* what) {
  const py::dtype dt = a.dtype();
  const char kind = dt.kind();
  const auto size = static_cast<std::size_t>(dt.itemsize());
  const char order = dt.attr("byteorder").cast<std::string>().at(0);
  if (order != '=' && order != '|') {
    const bool little = py::module_::import("sys").attr("byteorder").cast<std::string>() == "little";
    if ((order == '<') != little)
      throw py::type_error(std::string(what) + ": byte order is not the machine's (use " + what +
                           ".astype(" + what + ".dtype.newbyteorder('='))");
  }
  if (kind == 'f' && size == 4) return ElementType::f32;
  if (kind == 'f' && size == 8) return ElementType::f64;
  if (kind == 'i' && size == 1) return ElementType::i8;
  if (kind == 'i' && size == 2) return ElementType::i16;
  if (kind == 'i' && size == 4) return ElementType::i32;
  if (kind == 'i' && size == 8) return ElementType::i64;
  if (kind == 'u' && size == 1) return ElementType::u8;
  if (kind == 'u' && size == 2) return ElementType::u16;
  if (kind == 'u' && size == 4) return ElementType::u32;
  if (kind == 'u' && size == 8) return ElementType::u64;
  throw py::type_error(std::string(what) + ": dtype " + dt.attr("name").cast<std::string>() +
                       " is not a real number type (float32 or float64 expected)");
}

std::string shape_text(const py::array& a) {
  std::string s = "(";
  for (py::ssize_t k = 0; k < a.ndim(); ++k) s += (k ? ", " : "") + std::to_string(a.shape(k));
  return s + (a.ndim() == 1 ? ",)" : ")");
}

/// A 1-D coordinate as doubles (copied: coordinates are small).
std::vector<double> coordinate(const py::handle& obj, const char* what, const std::string& source) {
  const auto a = py::array_t<double, py::array::forcecast>::ensure(obj);
  if (!a) throw py::type_error(std::string(what) + ": not convertible to a float64 array");
  if (a.ndim() != 1)
    throw input_error(source, "", std::string(what) + " must be 1-D, got shape " + shape_text(a));
  const auto r = a.unchecked<1>();
  std::vector<double> v(static_cast<std::size_t>(r.shape(0)));
  for (py::ssize_t k = 0; k < r.shape(0); ++k) v[static_cast<std::size_t>(k)] = r(k);
  return v;
}

HeightKind kind_of(const std::string& kind) {
  if (kind == "anomaly") return HeightKind::anomaly;
  if (kind == "absolute") return HeightKind::absolute;
  throw py::value_error("kind: '" + kind + "' is not absolute or anomaly");
}

/// An attribute as a Python value: str, or a numpy array/scalar of its nc_type.
py::object attribute_value(const Attribute& a) {
  if (a.nc_type == NC_CHAR || a.nc_type == NC_STRING) return py::str(a.text);
  const char* dtype = "float64";
  switch (a.nc_type) {
    case NC_BYTE: dtype = "int8"; break;
    case NC_UBYTE: dtype = "uint8"; break;
    case NC_SHORT: dtype = "int16"; break;
    case NC_USHORT: dtype = "uint16"; break;
    case NC_INT: dtype = "int32"; break;
    case NC_UINT: dtype = "uint32"; break;
    case NC_INT64: dtype = "int64"; break;
    case NC_UINT64: dtype = "uint64"; break;
    case NC_FLOAT: dtype = "float32"; break;
    default: break;
  }
  py::module_ np = py::module_::import("numpy");
  py::object arr = np.attr("array")(a.values, py::arg("dtype") = dtype);
  // One value reads back from netCDF as a numpy scalar (netCDF4-python, xarray).
  if (a.values.size() == 1) return arr[py::int_(0)];
  return arr;
}

py::list attribute_list(const std::vector<Attribute>& attrs) {
  py::list out;
  for (const Attribute& a : attrs) out.append(py::make_tuple(a.name, attribute_value(a)));
  return out;
}

/// Dataset variables from Python dicts (name, dims, shape, numeric, decoded_time, text).
std::vector<VariableDescription> descriptions(const py::list& vars) {
  std::vector<VariableDescription> out;
  for (const py::handle& h : vars) {
    const auto d = h.cast<py::dict>();
    VariableDescription v;
    v.name = d["name"].cast<std::string>();
    v.dims = d["dims"].cast<std::vector<std::string>>();
    v.shape = d["shape"].cast<std::vector<std::size_t>>();
    v.numeric = d["numeric"].cast<bool>();
    v.decoded_time = d["decoded_time"].cast<bool>();
    v.text = d["text"].cast<std::map<std::string, std::string>>();
    out.push_back(std::move(v));
  }
  return out;
}

py::object optional_index(const std::optional<std::size_t>& k) {
  return k ? py::object(py::int_(*k)) : py::object(py::none());
}

/// Computes the fields of ETA (2-D or 3-D, time first) on LAT x LON.
py::dict compute(const py::array& eta, const py::object& mask_obj, const py::object& lat_obj,
                 const py::object& lon_obj, const CurrentsOptions& options,
                 const std::string& field_list, int threads, bool float64,
                 const Unpacking& unpacking, const std::string& source,
                 const std::string& variable) {
  const std::vector<std::string> fields = parse_field_list(field_list);
  if (threads < 0) throw UsageError("--threads: must be >= 0");
  const ElementType type = element_type(eta, "eta");
  if (eta.ndim() != 2 && eta.ndim() != 3)
    throw input_error(
        source, variable,
        "heights must be 2-D (lat, lon) or 3-D (time, lat, lon), got shape " + shape_text(eta));
  Grid grid = make_memory_grid(coordinate(lat_obj, "lat", source),
                               coordinate(lon_obj, "lon", source), source, variable);

  HeightArray h;
  h.data = eta.data();
  h.type = type;
  const py::ssize_t off = eta.ndim() == 3 ? 1 : 0;
  h.nt = off ? static_cast<std::size_t>(eta.shape(0)) : 1;
  h.ny = static_cast<std::size_t>(eta.shape(off));
  h.nx = static_cast<std::size_t>(eta.shape(off + 1));
  h.strides[0] = off ? eta.strides(0) : 0;
  h.strides[1] = eta.strides(off);
  h.strides[2] = eta.strides(off + 1);
  py::array mask;
  if (!mask_obj.is_none()) {
    mask = py::array::ensure(mask_obj);
    if (!mask || mask.dtype().kind() != 'b' || mask.itemsize() != 1)
      throw py::type_error("mask: a numpy bool array is needed");
    if (mask.ndim() != eta.ndim())
      throw input_error(source, variable,
                        "mask of shape " + shape_text(mask) + " does not match heights of shape " +
                            shape_text(eta));
    for (py::ssize_t k = 0; k < eta.ndim(); ++k)
      if (mask.shape(k) != eta.shape(k))
        throw input_error(source, variable,
                          "mask of shape " + shape_text(mask) +
                              " does not match heights of shape " + shape_text(eta));
    h.mask = mask.data();
    h.mask_strides[0] = off ? mask.strides(0) : 0;
    h.mask_strides[1] = mask.strides(off);
    h.mask_strides[2] = mask.strides(off + 1);
  }
  if (h.ny != grid.ny() || h.nx != grid.nx())
    throw input_error(source, variable,
                      "heights of shape " + shape_text(eta) + " do not match lat (" +
                          std::to_string(grid.ny()) + ") x lon (" + std::to_string(grid.nx()) +
                          ")");

  // Outputs allocated here, filled without the GIL.
  std::vector<py::ssize_t> shape;
  if (off) shape.push_back(static_cast<py::ssize_t>(h.nt));
  shape.push_back(static_cast<py::ssize_t>(h.ny));
  shape.push_back(static_cast<py::ssize_t>(h.nx));
  CurrentsArrays out;
  out.fields = fields;
  out.float64 = float64;
  py::dict result;
  for (const std::string& f : fields) {
    py::array a;
    if (f == "quality") a = py::array_t<std::int8_t>(shape);
    else if (float64) a = py::array_t<double>(shape);
    else a = py::array_t<float>(shape);
    out.data.push_back(a.mutable_data());
    result[py::str(f)] = a;
  }
  {
    py::gil_scoped_release release;
    compute_currents(h, unpacking, grid, options, out, threads, source, variable);
  }
  return result;
}

}  // namespace
}  // namespace seatilt

PYBIND11_MODULE(_seatilt, m) {
  using namespace seatilt;
  m.doc() =
      "seatilt's library in memory: geostrophic surface currents and kinematics of numpy "
      "arrays. Use the package seatilt (seatilt.currents, seatilt.xr.currents), not this "
      "module directly.";
  m.attr("__version__") = version();

  static py::exception<UsageError> usage_exc(m, "UsageError", PyExc_ValueError);
  static py::exception<InputError> input_exc(m, "InputError", PyExc_ValueError);
  py::register_exception_translator([](std::exception_ptr p) {
    try {
      if (p) std::rethrow_exception(p);
    } catch (const UsageError& e) {
      PyErr_SetString(usage_exc.ptr(), e.what());
    } catch (const InputError& e) {
      PyErr_SetString(input_exc.ptr(), e.what());
    } catch (const OutputError& e) {
      PyErr_SetString(PyExc_OSError, e.what());
    }
  });

  py::class_<CurrentsOptions>(m, "Options", "Resolved options of the currents computation.")
      .def_readonly("order", &CurrentsOptions::order)
      .def_readonly("equator_band", &CurrentsOptions::equator_band_deg)
      .def_readonly("gravity_value", &CurrentsOptions::gravity_value)
      .def_property_readonly("equator", [](const CurrentsOptions& o) { return to_string(o.equator); })
      .def_property_readonly("coast", [](const CurrentsOptions& o) { return to_string(o.coast); })
      .def_property_readonly("earth", [](const CurrentsOptions& o) { return to_string(o.earth); })
      .def_property_readonly("gravity", [](const CurrentsOptions& o) { return gravity_description(o); });

  m.def(
      "resolve_options",
      [](int order, const std::string& equator, double band, const std::string& coast,
         const std::string& earth, const std::string& gravity) {
        CurrentsOptionText t;
        t.order = order;
        t.equator = equator;
        t.equator_band_deg = band;
        t.coast = coast;
        t.earth = earth;
        t.gravity = gravity;
        return currents_options_from_text(t);
      },
      py::arg("order"), py::arg("equator"), py::arg("equator_band"), py::arg("coast"),
      py::arg("earth"), py::arg("gravity"),
      "Resolves option texts as the command line does; UsageError (ValueError) with its message.");

  m.def("parse_fields", &parse_field_list, py::arg("fields"),
        "Output fields of a comma list ('all' = every field); quality always included.");
  m.def("field_names", &currents_field_names, "Names of every output field, in output order.");
  m.def("caution", [] { return std::string(currents_caution()); },
        "What geostrophic surface currents are not (the outputs' comment attribute).");

  py::class_<Unpacking>(m, "Unpacking", "How stored values become heights in metres.")
      .def(py::init<>())
      .def_readwrite("scale_factor", &Unpacking::scale_factor)
      .def_readwrite("add_offset", &Unpacking::add_offset)
      .def_readwrite("to_metres_scale", &Unpacking::to_metres_scale)
      .def_readwrite("to_metres_offset", &Unpacking::to_metres_offset)
      .def_readwrite("fill_value", &Unpacking::fill_value)
      .def_readwrite("missing_values", &Unpacking::missing_values)
      .def_readwrite("valid_min", &Unpacking::valid_min)
      .def_readwrite("valid_max", &Unpacking::valid_max)
      .def_readwrite("unsigned_data", &Unpacking::unsigned_data);

  m.def(
      "length_to_metres",
      [](const std::string& units) -> py::object {
        double scale = 1.0, offset = 0.0;
        std::string why;
        if (!length_units_to_metres(units, scale, offset, why)) return py::none();
        return py::make_tuple(scale, offset);
      },
      py::arg("units"), "(scale, offset) with metres = value * scale + offset, or None.");

  m.def(
      "unpacking_from_attributes",
      [](const py::dtype& storage, const py::list& attrs, bool unsigned_data, double scale,
         double offset, const std::string& source, const std::string& variable) {
        const ElementType st = element_type(py::array(storage, 0), "storage");
        std::vector<NumberAttribute> list;
        for (const py::handle& item : attrs) {
          const auto t = item.cast<py::tuple>();
          NumberAttribute a;
          a.name = t[0].cast<std::string>();
          const auto values = py::array_t<double, py::array::forcecast>::ensure(t[1]);
          a.type = element_type(py::array::ensure(t[1]), a.name.c_str());
          for (py::ssize_t k = 0; k < values.size(); ++k) a.values.push_back(values.data()[k]);
          list.push_back(std::move(a));
        }
        return unpacking_from_attributes(st, list, unsigned_data, scale, offset, source, variable);
      },
      py::arg("storage"), py::arg("attrs"), py::arg("unsigned_data"), py::arg("to_metres_scale"),
      py::arg("to_metres_offset"), py::arg("source"), py::arg("variable"),
      "The reader's unpacking rules from (name, numpy value) attribute pairs.");

  m.def(
      "describe_dataset",
      [](const py::list& vars, const std::string& variable, const std::string& units,
         const std::string& source, const std::string& given_because) {
        const DatasetLayout l =
            describe_dataset(descriptions(vars), variable, units, source, given_because);
        py::dict d;
        d["height"] = l.height;
        d["chosen_because"] = l.chosen_because;
        d["kind"] = l.kind == HeightKind::anomaly ? "anomaly" : "absolute";
        d["kind_reason"] = l.kind_reason;
        d["lat"] = l.lat;
        d["lon"] = l.lon;
        d["time"] = optional_index(l.time);
        d["lat_dim"] = l.lat_dim;
        d["lon_dim"] = l.lon_dim;
        d["time_dim"] = optional_index(l.time_dim);
        d["units"] = l.units;
        d["units_overridden"] = l.units_overridden;
        d["to_metres_scale"] = l.to_metres_scale;
        d["to_metres_offset"] = l.to_metres_offset;
        return d;
      },
      py::arg("variables"), py::arg("variable"), py::arg("units"), py::arg("source"),
      py::arg("given_because") = "",
      "The reader's choice of height variable, coordinates and units for described variables.");

  m.def(
      "variable_attributes",
      [](const std::vector<std::string>& fields, const std::string& kind) {
        py::dict out;
        for (const OutputVariable& v : currents_variables(fields, kind_of(kind)))
          out[py::str(v.name)] = attribute_list(v.attrs);
        return out;
      },
      py::arg("fields"), py::arg("kind"),
      "CF attributes of each output variable as (name, value) pairs (product catalogue).");

  m.def(
      "global_attributes",
      [](const std::string& source, const std::string& variable, const std::string& kind,
         const std::string& units, const py::object& lat, const py::object& lon,
         const std::string& history, const CurrentsOptions& options,
         const std::string& command_line) {
        HeightInfo info;
        info.path = source;
        info.variable = variable;
        info.kind = kind_of(kind);
        info.units = units;
        info.lat.values = coordinate(lat, "lat", source);
        info.lon.values = coordinate(lon, "lon", source);
        if (info.lat.values.empty() || info.lon.values.empty())
          throw py::value_error("lat and lon must not be empty");
        if (!history.empty()) info.global_attrs.push_back(text_attribute("history", history));
        return attribute_list(currents_global_attributes(info, options, command_line));
      },
      py::arg("source"), py::arg("variable"), py::arg("kind"), py::arg("units"), py::arg("lat"),
      py::arg("lon"), py::arg("history"), py::arg("options"), py::arg("command_line"),
      "Global attributes of a currents output (CF-1.12, ACDD-1.3, settings, caution).");

  m.def("compute", &compute, py::arg("eta"), py::arg("mask"), py::arg("lat"), py::arg("lon"),
        py::arg("options"), py::arg("fields"), py::arg("threads"), py::arg("float64"),
        py::arg("unpacking"), py::arg("source"), py::arg("variable"),
        "Computes the fields of heights ETA (2-D or 3-D, time first) without the GIL; "
        "returns {name: array} in field order.");

  m.attr("quality_meanings") = quality::meanings;
  m.attr("float_fill") = py::float_(static_cast<double>(9.9692099683868690e+36f));
}
