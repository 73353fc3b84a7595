#pragma once
// The key reference of scenario files: every table the reader knows, each key with its type,
// physical dimension, default (or "required"), allowed values and meaning, and each potential
// shape with its parameters and formula. The reader (scenario.cpp) takes the keys it accepts
// from here (check_keys), so a key it accepts is a key this reference lists; `trapwork keys`
// prints it and examples/scenario-keys.md is its generated Markdown copy (a test compares them).
//
// Adding a table: one TableSpec in scenario_tables() (keys.cpp), its address in the reader's
// check_keys call (table_keys("noise")), and the regenerated Markdown
// (trapwork keys --markdown > examples/scenario-keys.md).
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "potentials/potential.hpp"
#include "solver/units.hpp"

namespace trapwork {

enum class KeyType {
  quantity,  // a number with its unit in quotes ("1 MHz"), of `dimension`
  number,    // a plain number without quotes or unit
  integer,   // a whole number without quotes
  boolean,   // true or false
  text,      // a string in quotes
  choice,    // a string, one of `choices`
  array,     // an array [...]
  table,     // a sub-table [a.b]
  tables,    // an array of tables [[a.b]]
};

struct KeySpec {
  std::string name;
  KeyType type = KeyType::text;
  std::optional<Dimension> dimension;  // quantity keys (and arrays of quantities)
  std::string default_text;            // "required", a value, or what happens without it
  std::vector<std::string> choices;    // choice keys
  std::string meaning;                 // one line
  std::string example;                 // a valid TOML value, e.g. "\"1 MHz\"" (docs and tests)
  bool required() const { return default_text == "required"; }
};

struct TableSpec {
  std::string address;  // "particle", "protocol.change", "box.soft_walls"; "top" for the top level
  std::string header;   // as written in a file: "[particle]", "[[protocol.change]]", "(top level)"
  std::string meaning;
  std::vector<KeySpec> keys;
};

struct ShapeSpec {
  Shape shape;
  std::string formula;              // V(x) = ... as plain text
  std::vector<KeySpec> parameters;  // the shape's parameters (potentials/potential.hpp), in order
  std::vector<KeySpec> settings;    // table and formula shapes: file, units, expression, ...
};

// Every table of a scenario file, in file order (the top level first).
const std::vector<TableSpec>& scenario_tables();
// The table at `address`; throws ContractViolation for an address the reference does not know.
const TableSpec& table_spec(std::string_view address);
// The key names of a table (what the reader's check_keys allows there).
std::vector<std::string> table_keys(std::string_view address);

// Every potential shape, in the order of enum Shape.
const std::vector<ShapeSpec>& shape_specs();
const ShapeSpec& shape_spec(Shape s);
// The keys a [[potential]] table of shape `s` takes: name, shape, the parameters, the settings.
std::vector<std::string> term_keys(Shape s);
// The parameter `name` of shape `s`, or nullptr (formula: the user's own parameters).
const KeySpec* shape_parameter(Shape s, std::string_view name);

// Addresses `trapwork keys` takes: every table address, and "potential.<shape>" per shape.
std::vector<std::string> reference_addresses();
// The reference as readable plain text or as Markdown: all of it (`address` empty) or one
// table or shape ("work", "box.soft_walls", "potential.gaussian"; a bare shape name "gaussian"
// is taken too). Throws InputError listing the known addresses for an unknown one.
std::string keys_text(std::string_view address, bool markdown);

// The type of a key as written in the reference: "frequency (quantity with unit)", "integer"...
std::string key_type_text(const KeySpec& k);

}  // namespace trapwork
