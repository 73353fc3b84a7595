#pragma once
// Scenario edits: a scenario's TOML text with some values changed, and a scenario's TOML text
// built from JSON. Both return text for read_scenario_text (solver/scenario/scenario.hpp), so
// every check of the reader applies to the result and its errors name lines of that text.
#include <nlohmann/json.hpp>
#include <string>
#include <string_view>

namespace trapwork {

// The scenario's TOML text with values changed, edited in place so that every other line keeps
// its number: a value's source span is replaced by the new value (a multi-line array by the
// value and as many line breaks as it spanned); a key missing from an existing table is inserted
// as a new line after that table's last key line (or after its header), which moves the later
// lines down by one; a table missing entirely ([work] when there is none) is appended at the end.
// `values` is a JSON object, address -> value: a string ("2 us", written as a TOML string), a
// number (an integer stays an integer, any other number is written in its shortest round-trip
// form), a bool, or an array of these (objects become inline tables).
// Addresses: "table.key" ("protocol.duration", "work.steps", "grid.points", "particle.mass",
// "initial.temperature", "box.left", "sweep.values", "title"), "<term name>.<parameter>"
// ("trap.quartic", the [[potential]] with that name), "potential[2].frequency" (counted from 1),
// "change[1].to" / "protocol.change[1].to" and the other keys of a change, and nested tables
// ("trap.parameters.a", "potential[1].parameters.a", "box.soft_walls.widths").
// Setting one of [initial]'s exclusive keys (temperature, mean_phonons, level, weights) removes
// the others (the new key takes the line of the first one removed when it was missing); so do
// sweep.values and sweep.from / to / points.
// Throws InputError naming the address and the value, with the closest known address as a
// suggestion, for an unknown address (no such table or term, an index out of range), a value
// JSON cannot give as TOML (null), or text that is not TOML. Whether a key belongs in its table
// and whether the value is valid is left to read_scenario_text.
std::string scenario_text_with_values(std::string_view text, const std::string& file_name,
                                      const nlohmann::json& values);

// The TOML text of a scenario given as a JSON object with the same keys as the file: objects
// become [tables] (nested objects sub-tables, [potential.parameters], [box.soft_walls]), arrays
// of objects arrays of tables ("potential" -> [[potential]], protocol.change ->
// [[protocol.change]]); the top-level keys in file order (title, description, particle, units,
// potential, box, ...; unknown keys after them, for the reader to refuse). Throws InputError
// naming the key for null values or a scenario that is not a JSON object.
std::string scenario_text_from_json(const nlohmann::json& scenario);

}  // namespace trapwork
