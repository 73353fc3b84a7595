// Scenario edits (see scenario_edit.hpp): TOML text changed in place through toml++'s source
// positions (line and column, in code points, of every key and value), and TOML text from JSON.
#include "solver/scenario/scenario_edit.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <optional>
#include <vector>

#include "solver/errors.hpp"
#include "solver/scenario/keys.hpp"
#include "solver/units.hpp"

namespace trapwork {

namespace {

using Json = nlohmann::json;

// The scenario's tables and top-level keys in file order, from the key reference the reader
// uses (keys.hpp); used to append a missing table, to order the tables written from JSON and
// for suggestions.
const std::vector<std::string> top_level_order = table_keys("top");
const std::vector<std::string> scenario_table_names = [] {
  std::vector<std::string> out;
  for (const KeySpec& k : table_spec("top").keys)
    if (k.type == KeyType::table || k.type == KeyType::tables) out.push_back(k.name);
  return out;
}();

const char* const address_forms = "table.key, <term name>.<parameter>, potential[N].key or change[N].key";

// ---- TOML text of JSON values ----------------------------------------------------------------

std::string toml_string(std::string_view s) {
  std::string out = "\"";
  for (const unsigned char c : s) {
    switch (c) {
      case '"':
        out += "\\\"";
        break;
      case '\\':
        out += "\\\\";
        break;
      case '\b':
        out += "\\b";
        break;
      case '\t':
        out += "\\t";
        break;
      case '\n':
        out += "\\n";
        break;
      case '\f':
        out += "\\f";
        break;
      case '\r':
        out += "\\r";
        break;
      default:
        if (c < 0x20 || c == 0x7f) {
          char code[8];
          std::snprintf(code, sizeof code, "\\u%04X", unsigned(c));
          out += code;
        } else {
          out += char(c);
        }
    }
  }
  return out + "\"";
}

bool is_bare_key(std::string_view k) {
  return !k.empty() && std::all_of(k.begin(), k.end(),
                                   [](unsigned char c) { return std::isalnum(c) || c == '_' || c == '-'; });
}

std::string toml_key(const std::string& k) {
  return is_bare_key(k) ? k : toml_string(k);
}

// Shortest text that reads back to the same double (std::to_chars), with ".0" added to an
// integral value so that TOML reads a float.
std::string toml_float(double v) {
  if (std::isnan(v)) return "nan";
  if (std::isinf(v)) return v > 0 ? "inf" : "-inf";
  char buffer[32];
  const auto r = std::to_chars(buffer, buffer + sizeof buffer, v);
  std::string s(buffer, r.ptr);
  if (s.find_first_of(".eE") == std::string::npos) s += ".0";
  return s;
}

// A JSON value as a TOML value (inline: objects become inline tables). `key` names the value in
// the error for what TOML cannot hold (null, an integer beyond 2^63 - 1).
std::string toml_value(const Json& v, const std::string& key) {
  switch (v.type()) {
    case Json::value_t::string:
      return toml_string(v.get_ref<const std::string&>());
    case Json::value_t::boolean:
      return v.get<bool>() ? "true" : "false";
    case Json::value_t::number_integer:
      return std::to_string(v.get<std::int64_t>());
    case Json::value_t::number_unsigned: {
      const auto u = v.get<std::uint64_t>();
      if (u > std::uint64_t(std::numeric_limits<std::int64_t>::max()))
        throw InputError(key, std::to_string(u), "an integer TOML can hold (at most 2^63 - 1)");
      return std::to_string(u);
    }
    case Json::value_t::number_float:
      return toml_float(v.get<double>());
    case Json::value_t::array: {
      std::string s = "[";
      for (std::size_t i = 0; i < v.size(); ++i)
        s += (i ? ", " : "") + toml_value(v[i], key + "[" + std::to_string(i + 1) + "]");
      return s + "]";
    }
    case Json::value_t::object: {
      std::string s = "{";
      bool first = true;
      for (const auto& [k, e] : v.items()) {
        s += (first ? " " : ", ") + toml_key(k) + " = " + toml_value(e, key + "." + k);
        first = false;
      }
      return s + (first ? "}" : " }");
    }
    default:
      throw InputError(key, v.dump(), "a string (\"2 us\"), a number, true or false, or an array of these");
  }
}

// ---- positions in the text -----------------------------------------------------------------

toml::table parse(std::string_view text, const std::string& file_name) {
  try {
    return toml::parse(text, file_name);
  } catch (const toml::parse_error& e) {
    throw InputError("", "", "TOML syntax: " + std::string(e.description()), "", file_name,
                     static_cast<int>(e.source().begin.line), static_cast<int>(e.source().begin.column));
  }
}

// The text with its line starts: line n (from 1) starts at starts[n - 1].
struct Lines {
  const std::string& text;
  std::vector<std::size_t> starts;
  explicit Lines(const std::string& t) : text(t), starts{0} {
    for (std::size_t i = 0; i < t.size(); ++i)
      if (t[i] == '\n') starts.push_back(i + 1);
  }
  // Byte offset of a toml++ position (columns count UTF-8 code points, from 1).
  std::size_t offset(const toml::source_position& p) const {
    std::size_t i = starts.at(p.line - 1);
    for (toml::source_index column = 1; column < p.column && i < text.size(); ++column) {
      ++i;
      while (i < text.size() && (static_cast<unsigned char>(text[i]) & 0xC0) == 0x80) ++i;
    }
    return i;
  }
  // Offset just after line n (the start of line n + 1, or the end of the text); 0 for n = 0.
  std::size_t after_line(std::size_t n) const { return n < starts.size() ? starts[n] : text.size(); }
  std::string line(std::size_t n) const {
    const std::size_t begin = starts.at(n - 1);
    return text.substr(begin, after_line(n) - begin);
  }
};

// Whether table `t` was opened by its own header line [path] or [[path]] (and not implicitly, by a
// dotted key or a deeper header).
bool has_header(const toml::table& t, const std::string& path, const Lines& lines) {
  if (t.is_inline() || path.empty() || t.source().begin.line == 0) return false;
  std::string compact;
  for (char c : lines.line(t.source().begin.line))
    if (c != ' ' && c != '\t') compact += c;
  return compact.rfind("[" + path + "]", 0) == 0 || compact.rfind("[[" + path + "]]", 0) == 0;
}

// The last line holding a key of table `t` (tables with their own header not counted); 0 if none.
std::size_t last_key_line(const toml::table& t, const std::string& path, const Lines& lines) {
  std::size_t last = 0;
  for (const auto& [k, v] : t) {
    const std::string sub = path.empty() ? std::string(k.str()) : path + "." + std::string(k.str());
    if (const auto* table = v.as_table()) {
      if (!has_header(*table, sub, lines))
        last = std::max<std::size_t>(
            last, table->is_inline() ? v.source().end.line : last_key_line(*table, sub, lines));
      continue;
    }
    if (const auto* array = v.as_array();
        array && array->is_array_of_tables() && !array->empty() && !array->front().as_table()->is_inline())
      continue;  // [[path]] tables
    last = std::max<std::size_t>(last, v.source().end.line);
  }
  return last;
}

const toml::key* key_of(const toml::table& t, const std::string& name) {
  for (const auto& [k, v] : t)
    if (k.str() == name) return &k;
  return nullptr;
}

// ---- addresses -----------------------------------------------------------------------------

struct Segment {
  std::string key;
  std::size_t index = 0;  // "change[1]": 1 (from 1); 0 when no index is given
};

std::string segment_text(const Segment& s) {
  return s.index ? s.key + "[" + std::to_string(s.index) + "]" : s.key;
}

// Every address of the scenario's values: table.key with array tables numbered from 1, and the
// same through term names ("trap.frequency") and change[N].
void collect_addresses(const toml::table& t, const std::string& prefix, std::vector<std::string>& out) {
  for (const auto& [k, v] : t) {
    const std::string name = prefix.empty() ? std::string(k.str()) : prefix + "." + std::string(k.str());
    if (const auto* sub = v.as_table()) {
      collect_addresses(*sub, name, out);
    } else if (const auto* array = v.as_array(); array && array->is_array_of_tables()) {
      for (std::size_t i = 0; i < array->size(); ++i)
        collect_addresses(*array->at(i).as_table(), name + "[" + std::to_string(i + 1) + "]", out);
    } else {
      out.push_back(name);
    }
  }
}

// The [[potential]] tables with the names the reader gives them ("term<N>" when unnamed).
std::vector<std::pair<std::string, const toml::table*>> terms(const toml::table& root) {
  std::vector<std::pair<std::string, const toml::table*>> out;
  if (const auto* array = root["potential"].as_array(); array && array->is_array_of_tables())
    for (std::size_t i = 0; i < array->size(); ++i) {
      const auto* t = array->at(i).as_table();
      out.emplace_back(t->get_as<std::string>("name") ? t->get_as<std::string>("name")->get()
                                                      : "term" + std::to_string(i + 1),
                       t);
    }
  return out;
}

// Keys that setting `key` in top-level table `table` removes (the reader takes only one of them).
std::vector<std::string> excluded_by(const std::string& table, const std::string& key) {
  const std::vector<std::string> initial = {"temperature", "mean_phonons", "level", "weights"};
  const std::vector<std::string> range = {"from", "to", "points"};
  std::vector<std::string> out;
  if (table == "initial" && std::find(initial.begin(), initial.end(), key) != initial.end())
    std::copy_if(initial.begin(), initial.end(), std::back_inserter(out),
                 [&](const auto& k) { return k != key; });
  if (table == "sweep" && key == "values") out = range;
  if (table == "sweep" && std::find(range.begin(), range.end(), key) != range.end()) out = {"values"};
  return out;
}

// One value set at one address.
class Edit {
 public:
  Edit(const std::string& text, const std::string& file_name, const std::string& address, const Json& value)
      : text_(text), file_(file_name), address_(address), value_(toml_value(value, address)) {}

  // The edited text; `table` and `key` receive the top-level table and the key set (for the
  // exclusive-key check across several values).
  std::string apply(std::string& table, std::string& key);

 private:
  const std::string& text_;
  const std::string& file_;
  const std::string& address_;
  std::string value_;
  std::vector<Segment> segments_;

  // Throws InputError for this address; `suggest`: with the closest known address.
  [[noreturn]] void unknown(const toml::table& root, const std::string& expected, bool suggest = true) const;
  std::vector<Segment> split() const;
};

std::vector<Segment> Edit::split() const {
  std::vector<Segment> out;
  std::size_t begin = 0;
  while (true) {
    const std::size_t dot = address_.find('.', begin);
    std::string part = address_.substr(begin, dot == std::string::npos ? std::string::npos : dot - begin);
    Segment s;
    if (const std::size_t open = part.find('['); open != std::string::npos) {
      const std::string digits = part.substr(open + 1, part.size() - open - 2);
      const bool ok =
          part.back() == ']' && !digits.empty() && digits.size() < 9 &&
          std::all_of(digits.begin(), digits.end(), [](unsigned char c) { return std::isdigit(c); });
      if (!ok || std::stoul(digits) == 0)
        throw InputError(address_, value_,
                         std::string("an address: ") + address_forms + " (N counted from 1)", "", file_);
      s.index = std::stoul(digits);
      part.resize(open);
    }
    if (!is_bare_key(part))
      throw InputError(address_, value_, std::string("an address: ") + address_forms, "", file_);
    s.key = part;
    out.push_back(s);
    if (dot == std::string::npos) break;
    begin = dot + 1;
  }
  return out;
}

void Edit::unknown(const toml::table& root, const std::string& expected, bool suggest) const {
  if (!suggest) throw InputError(address_, value_, expected, "", file_);
  std::vector<std::string> known;
  collect_addresses(root, "", known);
  std::vector<std::string> heads = scenario_table_names;
  heads.insert(heads.end(), {"title", "description"});
  const auto named = terms(root);
  for (std::size_t i = 0; i < named.size(); ++i) {
    collect_addresses(*named[i].second, named[i].first, known);
    heads.push_back(named[i].first);
    heads.push_back("potential[" + std::to_string(i + 1) + "]");
  }
  if (const auto* changes = root["protocol"]["change"].as_array(); changes && changes->is_array_of_tables())
    for (std::size_t i = 0; i < changes->size(); ++i) {
      const std::string head = "change[" + std::to_string(i + 1) + "]";
      collect_addresses(*changes->at(i).as_table(), head, known);
      heads.push_back(head);
    }
  std::string suggestion = closest_name(address_, known, 3);
  if (suggestion.empty()) {
    const std::size_t dot = address_.find('.');
    const std::string head = closest_name(address_.substr(0, dot), heads, 3);
    if (!head.empty()) suggestion = head + (dot == std::string::npos ? "" : address_.substr(dot));
  }
  throw InputError(address_, value_, expected, suggestion, file_);
}

std::string Edit::apply(std::string& table_name, std::string& key_name) {
  segments_ = split();
  const toml::table root = parse(text_, file_);
  const Lines lines(text_);
  const std::string not_found = std::string("not an address of this scenario (") + address_forms + ")";

  // The first segment: a top-level key or table, a term by name or number, or change[N].
  std::vector<Segment> path = segments_;
  if (path.size() > 1 && path[0].key == "change" && path[0].index) {
    path[0].key = "protocol";
    path.insert(path.begin() + 1, Segment{"change", path[0].index});
    path[0].index = 0;
  }
  const toml::table* current = &root;
  std::string current_path;  // header path of `current` ("potential", "protocol.change", "" at the top)
  std::size_t first = 0;     // segments before `first` are resolved
  if (path.size() > 1 && !path[0].index && !root.get(path[0].key)) {
    for (const auto& [name, t] : terms(root))
      if (name == path[0].key) {
        current = t;
        current_path = "potential";
        first = 1;
      }
    if (!first &&
        std::find(scenario_table_names.begin(), scenario_table_names.end(), path[0].key) == scenario_table_names.end())
      unknown(root, not_found);
  }
  table_name = first ? "potential" : path[0].key;  // for the exclusive keys of [initial] and [sweep]

  // Down the tables: `anchor` is the deepest one with its own header (or the top), `below` the
  // keys from it to `current`, `missing` the tables still to create.
  const toml::table* anchor = &root;
  std::string anchor_path;
  std::vector<std::string> below, missing;
  if (first) {
    anchor = current;
    anchor_path = current_path;
  }
  for (std::size_t i = first; i + 1 < path.size(); ++i) {
    const Segment& s = path[i];
    const std::string sub = current_path.empty() ? s.key : current_path + "." + s.key;
    const toml::node* node = missing.empty() ? current->get(s.key) : nullptr;
    if (!node) {
      if (s.index) {
        const std::string count = current->get(s.key) ? "" : ": it has no [[" + sub + "]] tables";
        unknown(root, not_found + count);
      }
      if (current == &root &&
          (s.key == "potential" ||
           std::find(scenario_table_names.begin(), scenario_table_names.end(), s.key) == scenario_table_names.end()))
        unknown(root, not_found);
      missing.push_back(s.key);
      continue;
    }
    if (s.index) {
      const auto* array = node->as_array();
      if (!array || !array->is_array_of_tables())
        unknown(root, not_found + ": " + sub + " is not an array of tables");
      if (s.index > array->size())
        unknown(root, not_found + ": it has " + std::to_string(array->size()) + " [[" + sub + "]] table" +
                          (array->size() == 1 ? "" : "s"));
      current = array->at(s.index - 1).as_table();
    } else {
      if (node->is_array_of_tables())
        unknown(root, not_found + ": " + sub + " holds [[tables]]; give " + s.key + "[N]");
      if (!node->is_table())
        unknown(root, "an address of a value: " + segment_text(s) + " is a value, not a table", false);
      current = node->as_table();
    }
    current_path = sub;
    if (has_header(*current, current_path, lines)) {
      anchor = current;
      anchor_path = current_path;
      below.clear();
    } else {
      below.push_back(s.key);
      if (s.index) below.back() += "[]";  // an inline array of tables: keys cannot be added there
    }
  }
  const Segment& last = path.back();
  if (last.index) unknown(root, "an address of a key: " + segment_text(last) + " is an array element", false);
  key_name = last.key;
  if (path.size() == 1 &&
      std::find(scenario_table_names.begin(), scenario_table_names.end(), last.key) != scenario_table_names.end())
    unknown(root, "an address of a value: [" + last.key + "] is a table; give one of its keys", false);

  std::string text = text_;
  auto replace = [&](const toml::source_region& where, const std::string& with) {
    const std::size_t begin = lines.offset(where.begin), end = lines.offset(where.end);
    text.replace(begin, end - begin, with + std::string(where.end.line - where.begin.line, '\n'));
  };

  // An existing value: its span replaced.
  if (missing.empty())
    if (const toml::node* node = current->get(last.key)) {
      if (node->is_table() && !node->as_table()->is_inline())
        unknown(root, "an address of a value: " + last.key + " is a table; give one of its keys", false);
      if (node->is_array_of_tables() && !node->as_array()->front().as_table()->is_inline())
        unknown(root, "an address of a value: " + last.key + " holds [[tables]]; give one of their keys",
                false);
      // Removals after the replacement in the text go first, so that offsets stay valid.
      std::vector<std::pair<toml::source_region, std::string>> edits = {{node->source(), value_}};
      if (path.size() == 2)
        for (const auto& other : excluded_by(table_name, last.key))
          if (const toml::key* k = key_of(*current, other))
            edits.push_back({{k->source().begin, current->get(other)->source().end, {}}, ""});
      std::sort(edits.begin(), edits.end(),
                [](const auto& a, const auto& b) { return b.first.begin < a.first.begin; });
      for (const auto& [where, with] : edits) replace(where, with);
      return text;
    }

  std::vector<std::string> keys = below;
  keys.insert(keys.end(), missing.begin(), missing.end());
  keys.push_back(last.key);
  for (const auto& k : keys)
    if (k.find("[]") != std::string::npos || current->is_inline())
      unknown(
          root,
          "a key already in its table: keys cannot be added to an inline table { ... }; set the whole table",
          false);
  std::string dotted;
  for (const auto& k : keys) dotted += (dotted.empty() ? "" : ".") + k;

  // A missing top-level table, or one opened only by a deeper header ([box.soft_walls] without
  // [box]), is appended at the end; one made by dotted keys at the top (box.left = ...) gets
  // another dotted key there.
  const auto opened_by_header = [&](const std::string& top) {
    const toml::node* t = root.get(top);
    if (!t) return true;
    const std::string line = lines.line(t->source().begin.line);
    const std::size_t start = line.find_first_not_of(" \t");
    return start != std::string::npos && line[start] == '[';
  };
  if (anchor == &root && keys.size() > 1 && opened_by_header(keys[0])) {
    std::string rest;
    for (std::size_t i = 1; i < keys.size(); ++i) rest += (i > 1 ? "." : "") + keys[i];
    if (!text.empty() && text.back() != '\n') text += '\n';
    text += "\n[" + keys[0] + "]\n" + rest + " = " + value_ + "\n";
    return text;
  }

  // An exclusive key present: the new key takes its line, and the others' lines are emptied.
  if (keys.size() == 1 && path.size() == 2) {
    std::vector<std::pair<toml::source_region, std::string>> edits;
    for (const auto& other : excluded_by(table_name, last.key))
      if (const toml::key* k = key_of(*current, other))
        edits.push_back({{k->source().begin, current->get(other)->source().end, {}}, ""});
    if (!edits.empty()) {
      std::sort(edits.begin(), edits.end(),
                [](const auto& a, const auto& b) { return b.first.begin < a.first.begin; });
      edits.back().second = toml_key(last.key) + " = " + value_;
      for (const auto& [where, with] : edits) replace(where, with);
      return text;
    }
  }

  // A missing key: a new line after the last key line of its table (or after its header).
  std::size_t after = last_key_line(*anchor, anchor_path, lines);
  if (anchor != &root) after = std::max<std::size_t>(after, anchor->source().begin.line);
  const std::size_t at = lines.after_line(after);
  std::string line = dotted + " = " + value_ + "\n";
  if (at == text.size() && !text.empty() && text.back() != '\n') line = "\n" + line;
  text.insert(at, line);
  return text;
}

// ---- TOML text from JSON -------------------------------------------------------------------

bool is_table_array(const Json& v) {
  return v.is_array() && !v.empty() &&
         std::all_of(v.begin(), v.end(), [](const Json& e) { return e.is_object(); });
}

void write_table(std::string& out, const Json& table, const std::string& header, const std::string& dotted,
                 bool element) {
  if (!header.empty())
    out += (out.empty() ? "" : "\n") + (element ? "[[" + header + "]]\n" : "[" + header + "]\n");
  std::vector<std::string> order;
  if (header.empty())
    for (const auto& k : top_level_order)
      if (table.contains(k)) order.push_back(k);
  for (const auto& [k, v] : table.items())
    if (std::find(order.begin(), order.end(), k) == order.end()) order.push_back(k);
  auto join = [](const std::string& a, const std::string& b) { return a.empty() ? b : a + "." + b; };
  for (const auto& k : order) {
    const Json& v = table.at(k);
    if (!v.is_object() && !is_table_array(v))
      out += toml_key(k) + " = " + toml_value(v, join(dotted, k)) + "\n";
  }
  for (const auto& k : order)
    if (table.at(k).is_object())
      write_table(out, table.at(k), join(header, toml_key(k)), join(dotted, k), false);
  for (const auto& k : order) {
    const Json& v = table.at(k);
    if (!is_table_array(v)) continue;
    for (std::size_t i = 0; i < v.size(); ++i)
      write_table(out, v[i], join(header, toml_key(k)), join(dotted, k) + "[" + std::to_string(i + 1) + "]",
                  true);
  }
}

}  // namespace

std::string scenario_text_with_values(std::string_view text, const std::string& file_name,
                                      const Json& values) {
  if (!values.is_object())
    throw InputError("", values.dump(), "a JSON object of address -> value (\"protocol.duration\": \"2 us\")",
                     "", file_name);
  std::string edited(text);
  std::vector<std::pair<std::string, std::string>> done;  // (top-level table, key) set so far
  for (const auto& [address, value] : values.items()) {
    std::string table, key;
    edited = Edit(edited, file_name, address, value).apply(table, key);
    for (const auto& [t, k] : done) {
      const auto excluded = excluded_by(table, key);
      if (t == table && std::find(excluded.begin(), excluded.end(), k) != excluded.end())
        throw InputError(address, toml_value(value, address),
                         "not together with " + t + "." + k + " (the scenario takes only one of them)", "",
                         file_name);
    }
    done.emplace_back(table, key);
  }
  return edited;
}

std::string scenario_text_from_json(const Json& scenario) {
  if (!scenario.is_object())
    throw InputError("", scenario.dump().substr(0, 60),
                     "a scenario as a JSON object (\"particle\": {\"mass\": \"40 u\"}, ...)");
  std::string out;
  write_table(out, scenario, "", "", false);
  return out;
}

}  // namespace trapwork

namespace trapwork {

namespace {

// A TOML value as JSON (integers stay integers); nullopt for a table or a date.
std::optional<nlohmann::json> toml_value_json(const toml::node& n) {
  if (auto v = n.as_integer()) return nlohmann::json(v->get());
  if (auto v = n.as_floating_point()) return nlohmann::json(v->get());
  if (auto v = n.as_boolean()) return nlohmann::json(v->get());
  if (auto v = n.as_string()) return nlohmann::json(v->get());
  if (auto a = n.as_array()) {
    nlohmann::json out = nlohmann::json::array();
    for (const auto& e : *a) {
      auto j = toml_value_json(e);
      if (!j) return std::nullopt;
      out.push_back(*j);
    }
    return out;
  }
  return std::nullopt;
}

}  // namespace

nlohmann::json assignments_json(const std::vector<std::string>& assignments, const std::string& option) {
  nlohmann::json values = nlohmann::json::object();
  for (const auto& a : assignments) {
    const auto eq = a.find('=');
    std::string address = eq == std::string::npos ? std::string() : a.substr(0, eq);
    address.erase(0, std::min(address.size(), address.find_first_not_of(" \t")));
    address.erase(address.find_last_not_of(" \t") + 1);
    if (eq == std::string::npos || address.empty())
      throw InputError(option, a, "ADDRESS=VALUE, e.g. protocol.duration=\"1 us\" or trap.quartic=\"0.02 h*Hz/nm^4\"");
    std::string text = a.substr(eq + 1);
    text.erase(0, std::min(text.size(), text.find_first_not_of(" \t")));
    text.erase(text.find_last_not_of(" \t") + 1);
    std::optional<nlohmann::json> value;
    try {
      const toml::table t = toml::parse("value = " + text);
      if (const toml::node* n = t.get("value"); n && t.size() == 1) value = toml_value_json(*n);
    } catch (const toml::parse_error&) {
    }
    values[address] = value ? *value : nlohmann::json(text);
  }
  return values;
}

}  // namespace trapwork
