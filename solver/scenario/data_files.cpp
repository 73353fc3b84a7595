// Readers of measured data files (see data_files.hpp).
#include "solver/scenario/data_files.hpp"

#include <algorithm>
#include <charconv>
#include <cctype>
#include <cmath>
#include <cstdint>
#include <limits>
#include <filesystem>
#include <fstream>
#include <map>
#include <sstream>

#include "solver/errors.hpp"
#include "solver/scenario/output.hpp"
#include "solver/units.hpp"

namespace trapwork {

namespace {

using Field = TableField;
using Row = TableRow;
using Directive = TableDirective;
using Table = TextTable;

bool is_blank(char c) {
  return c == ' ' || c == '\t' || c == '\r' || c == '\v' || c == '\f';
}

std::string trimmed(std::string_view s) {
  std::size_t a = 0, b = s.size();
  while (a < b && is_blank(s[a])) ++a;
  while (b > a && is_blank(s[b - 1])) --b;
  return std::string(s.substr(a, b - a));
}

std::vector<Field> split_fields(std::string_view line, bool commas) {
  std::vector<Field> out;
  if (commas) {
    std::size_t start = 0;
    while (true) {
      const std::size_t end = std::min(line.find(',', start), line.size());
      std::size_t first = start;
      while (first < end && is_blank(line[first])) ++first;
      out.push_back({trimmed(line.substr(start, end - start)), int(first) + 1});
      if (end == line.size()) break;
      start = end + 1;
    }
  } else {
    std::size_t i = 0;
    while (i < line.size()) {
      while (i < line.size() && is_blank(line[i])) ++i;
      if (i == line.size()) break;
      const std::size_t first = i;
      while (i < line.size() && !is_blank(line[i])) ++i;
      out.push_back({std::string(line.substr(first, i - first)), int(first) + 1});
    }
  }
  return out;
}

// "# unit: h*kHz" -> the text after "unit:" when the comment starts with `word` and ':'.
std::optional<Directive> directive(std::string_view comment, std::string_view word, int line, int offset) {
  std::size_t i = 0;
  while (i < comment.size() && is_blank(comment[i])) ++i;
  if (comment.substr(i, word.size()) != word) return std::nullopt;
  std::size_t j = i + word.size();
  while (j < comment.size() && is_blank(comment[j])) ++j;
  if (j >= comment.size() || comment[j] != ':') return std::nullopt;
  ++j;
  while (j < comment.size() && is_blank(comment[j])) ++j;
  return Directive{trimmed(comment.substr(j)), line, offset + int(j) + 1};
}

}  // namespace

std::string_view without_byte_order_mark(std::string_view text) {
  if (text.substr(0, 3) == "\xEF\xBB\xBF") text.remove_prefix(3);
  return text;
}

std::string read_text_file(const std::string& path, const std::string& what) {
  std::error_code ec;
  if (std::filesystem::is_directory(path, ec))
    throw InputError("", "", "cannot open " + what + ": it is a folder", "", path);
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError("", "", "cannot open " + what, "", path);
  std::ostringstream text;
  text << in.rdbuf();
  return std::string(without_byte_order_mark(text.str()));
}

bool is_number(std::string_view s) {
  if (!s.empty() && s.front() == '+') s.remove_prefix(1);
  double v = 0;
  const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  return !s.empty() && end == s.data() + s.size() && (ec == std::errc() || ec == std::errc::result_out_of_range);
}

std::string TextTable::skipped() const {
  std::string out;
  if (header_line > 0) {
    out = "header line " + std::to_string(header_line) + " (";
    for (std::size_t i = 0; i < names.size(); ++i) out += (i ? ", " : "") + names[i].text;
    out += ")";
  }
  if (!comment_lines.empty()) {
    out += std::string(out.empty() ? "" : ", ") + (comment_lines.size() == 1 ? "comment line " : "comment lines ");
    for (std::size_t i = 0; i < comment_lines.size() && i < 8; ++i)
      out += (i ? ", " : "") + std::to_string(comment_lines[i]);
    if (comment_lines.size() > 8) out += " and " + std::to_string(comment_lines.size() - 8) + " more";
  }
  return out;
}

TextTable split_table(std::string_view text, const std::string& file, std::size_t columns) {
  text = without_byte_order_mark(text);
  const bool header_required = columns == 0;
  Table t;
  t.file = file;
  bool commas = false, first = true;
  int line_number = 0;
  std::size_t start = 0;
  while (start <= text.size()) {
    const std::size_t end = std::min(text.find('\n', start), text.size());
    std::string_view line = text.substr(start, end - start);
    ++line_number;
    start = end + 1;
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    const std::size_t hash = line.find('#');
    if (hash != std::string_view::npos) {
      const std::string_view before = line.substr(0, hash);
      if (trimmed(before).empty()) {  // a whole comment line: may hold a directive
        t.comment_lines.push_back(line_number);
        const std::string_view comment = line.substr(hash + 1);
        const int offset = int(hash) + 1;
        for (auto [word, slot] :
             {std::pair{"unit", &t.unit}, std::pair{"resolution", &t.resolution}, std::pair{"runs", &t.runs}}) {
          auto d = header_required ? directive(comment, word, line_number, offset) : std::nullopt;
          if (!d) continue;
          if (*slot)
            throw InputError(word, d->text,
                             "given twice (first on line " + std::to_string((*slot)->line) + "); keep one",
                             "", file, line_number, d->column);
          *slot = *d;
        }
        if (end == text.size()) break;
        continue;
      }
      line = before;
    }
    if (trimmed(line).empty()) {
      if (end == text.size()) break;
      continue;
    }
    if (first) {
      // The header rule (data_files.hpp): a header is a line with no number at all.
      first = false;
      commas = line.find(',') != std::string_view::npos;
      const std::vector<Field> fields = split_fields(line, commas);
      const auto number = std::find_if(fields.begin(), fields.end(), [](const Field& f) { return is_number(f.text); });
      const auto word = std::find_if(fields.begin(), fields.end(), [](const Field& f) { return !is_number(f.text); });
      if (number == fields.end()) {
        t.header_line = line_number;
        t.names = fields;
      } else if (header_required) {
        throw InputError("", number->text,
                         "column names on the first line (a header is a line with no number at all; this one "
                         "holds a number, so the header may be missing)",
                         "", file, line_number, number->column);
      } else if (word != fields.end()) {
        throw InputError("", word->text.empty() ? "(empty)" : word->text,
                         "a number: the first line mixes numbers and text, so it is neither a header (a header "
                         "is a line with no number at all) nor a data row",
                         "", file, line_number, word->column);
      } else {
        t.rows.push_back({line_number, fields});
      }
    } else {
      t.rows.push_back({line_number, split_fields(line, commas)});
    }
    if (end == text.size()) break;
  }
  // A table whose header may be left out may also come back empty: its reader says how many
  // rows it needs.
  if (!header_required && t.rows.empty()) return t;
  if (first)
    throw InputError("", "", "an empty data file: expected a header line with column names, then data rows", "",
                     file);
  std::map<std::string, int> seen;
  for (const auto& n : t.names) {
    if (n.text.empty())
      throw InputError("", "", "an empty column name in the header", "", file, t.header_line, n.column);
    if (seen.count(n.text))
      throw InputError(n.text, "", "a column named twice in the header (first at column " +
                                       std::to_string(seen[n.text]) + ")",
                       "", file, t.header_line, n.column);
    seen[n.text] = n.column;
  }
  if (t.rows.empty())
    throw InputError("", "", "no data rows after the header on line " + std::to_string(t.header_line), "", file);
  const std::size_t width = t.header_line > 0 ? t.names.size() : columns;
  const std::string per_row = t.header_line > 0 ? " fields, one per column of the header on line " +
                                                      std::to_string(t.header_line)
                                                : " fields per row";
  for (const auto& r : t.rows)
    if (r.fields.size() != width) {
      const int column = r.fields.size() > width ? r.fields[width].column : 1;
      throw InputError("", std::to_string(r.fields.size()) + " fields", std::to_string(width) + per_row, "", file,
                       r.line, column);
    }
  return t;
}

namespace {

// ---- columns ---------------------------------------------------------------------------

enum class ColumnType { integer, number, quantity, keep };

struct ColumnSpec {
  std::string base;  // "work", "lower", "count"
  ColumnType type = ColumnType::number;
  Dimension dimension;  // quantity columns
  bool required = true;
  bool main = false;    // takes the "# unit:" comment when the name has no unit
  std::string example;  // "work_h_kHz"
};

// A header column matched to its spec, with the SI value of one unit for quantities.
struct BoundColumn {
  const ColumnSpec* spec = nullptr;
  int index = -1;  // field index
  std::string name;
  double si_per_unit = 1;
  std::string unit;
};

const char* quantity_examples(const Dimension& d) {
  if (d == Dimension::energy()) return "an energy unit such as h*kHz, h*MHz, h*Hz, kB*uK, meV or J";
  if (d == Dimension::frequency()) return "a frequency unit such as Hz, kHz or MHz";
  return "a force unit such as h*kHz/um, h*Hz/nm or N";
}

// SI value of "1 <unit>", checked against the dimension; errors point at `where`.
double unit_value(const std::string& unit, const Dimension& d, const std::string& key, const Table& t, int line,
                  int column) {
  Quantity q;
  try {
    q = parse_quantity("1 " + unit);
  } catch (const InputError& e) {
    throw InputError(key, unit, std::string("an unknown unit: expected ") + quantity_examples(d), e.suggestion,
                     t.file, line, column);
  }
  if (q.plain || !(q.dimension == d) || !(q.value_si > 0) || !std::isfinite(q.value_si))
    throw InputError(key, unit, std::string("not ") + with_article(d) + " unit: expected " + quantity_examples(d),
                     "", t.file, line, column);
  return q.value_si;
}

std::map<std::string, BoundColumn> bind_columns(const Table& t, const std::vector<ColumnSpec>& specs,
                                                const std::string& kind) {
  std::vector<std::string> candidates;
  std::string listing;
  for (const auto& s : specs) {
    candidates.push_back(s.type == ColumnType::quantity ? s.example : s.base);
    listing += (listing.empty() ? "" : ", ") + (s.type == ColumnType::quantity ? s.base + "_<unit>" : s.base) +
               (s.required ? "" : " (optional)");
  }
  std::map<std::string, BoundColumn> bound;
  for (std::size_t i = 0; i < t.names.size(); ++i) {
    const Field& name = t.names[i];
    const ColumnSpec* match = nullptr;
    std::string unit;
    for (const auto& s : specs) {
      if (name.text == s.base) {
        match = &s;
        break;
      }
      if (s.type == ColumnType::quantity && name.text.size() > s.base.size() + 1 &&
          name.text.compare(0, s.base.size() + 1, s.base + "_") == 0) {
        match = &s;
        unit = name.text.substr(s.base.size() + 1);
        for (char& c : unit)
          if (c == '_') c = '*';
        break;
      }
    }
    if (!match)
      throw InputError(name.text, "", "not a column of a " + kind + " file; its columns are " + listing,
                       closest_name(name.text, candidates, 3), t.file, t.header_line, name.column);
    if (bound.count(match->base))
      throw InputError(name.text, "", "a second " + match->base + " column (the first is " +
                                          bound[match->base].name + ")",
                       "", t.file, t.header_line, name.column);
    BoundColumn b{match, int(i), name.text, 1, ""};
    if (match->type == ColumnType::quantity) {
      if (!unit.empty()) {
        b.si_per_unit = unit_value(unit, match->dimension, name.text, t, t.header_line, name.column);
        b.unit = unit;
      } else if (match->main && t.unit) {
        b.si_per_unit = unit_value(t.unit->text, match->dimension, "unit", t, t.unit->line, t.unit->column);
        b.unit = t.unit->text;
      } else {
        throw InputError(name.text, "",
                         "a column without its unit: name it with the unit, e.g. " + match->example +
                             (match->main ? ", or add a comment line '# unit: <unit>'" : ""),
                         "", t.file, t.header_line, name.column);
      }
    }
    bound[match->base] = b;
  }
  for (const auto& s : specs)
    if (s.required && !bound.count(s.base))
      throw InputError(s.type == ColumnType::quantity ? s.example : s.base, "",
                       "a required column is missing from the header (a " + kind + " file has the columns " +
                           listing + ")",
                       "", t.file, t.header_line, 0);
  return bound;
}

[[noreturn]] void bad_field(const Table& t, const Row& r, const BoundColumn& c, const std::string& expected) {
  const Field& f = r.fields[std::size_t(c.index)];
  throw InputError(c.name, f.text.empty() ? "(empty)" : f.text, expected, "", t.file, r.line, f.column);
}

double number_field(const Table& t, const Row& r, const BoundColumn& c) {
  std::string_view s = r.fields[std::size_t(c.index)].text;
  if (!s.empty() && s.front() == '+') s.remove_prefix(1);
  double v = 0;
  const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  if (s.empty() || ec != std::errc() || end != s.data() + s.size()) bad_field(t, r, c, "a number");
  if (!std::isfinite(v)) bad_field(t, r, c, "a finite number");
  return v;
}

double quantity_field(const Table& t, const Row& r, const BoundColumn& c) {
  const double v = number_field(t, r, c) * c.si_per_unit;
  if (!std::isfinite(v)) bad_field(t, r, c, "a finite number (too large in " + c.unit + ")");
  return v;
}

int integer_field(const Table& t, const Row& r, const BoundColumn& c, const std::string& expected) {
  std::string_view s = r.fields[std::size_t(c.index)].text;
  if (!s.empty() && s.front() == '+') s.remove_prefix(1);
  int v = 0;
  const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  if (s.empty() || ec != std::errc() || end != s.data() + s.size() || v < 0) bad_field(t, r, c, expected);
  return v;
}

// A decimal number's text ("1200", "-1.25e3", "+5") as its mantissa digits (the point removed,
// the sign dropped) and the power of ten of the last digit: value = +-digits * 10^exponent.
// nullopt when it is not such a number.
struct DecimalText {
  std::string digits;
  int exponent = 0;
};
std::optional<DecimalText> decimal_text(std::string_view s) {
  if (!s.empty() && (s.front() == '+' || s.front() == '-')) s.remove_prefix(1);
  DecimalText d;
  std::size_t i = 0;
  for (; i < s.size() && std::isdigit(static_cast<unsigned char>(s[i])); ++i) d.digits += s[i];
  if (i < s.size() && s[i] == '.')
    for (++i; i < s.size() && std::isdigit(static_cast<unsigned char>(s[i])); ++i, --d.exponent) d.digits += s[i];
  if (d.digits.empty()) return std::nullopt;
  if (i < s.size() && (s[i] == 'e' || s[i] == 'E')) {
    int e = 0;
    const char* from = s.data() + i + 1;
    if (from < s.data() + s.size() && *from == '+') ++from;
    const auto [end, ec] = std::from_chars(from, s.data() + s.size(), e);
    if (ec != std::errc() || end != s.data() + s.size() || from == s.data() + s.size()) return std::nullopt;
    if (e > 400 || e < -400) e = e > 0 ? 400 : -400;  // far beyond any double's digits either way
    d.exponent += e;
  } else if (i != s.size()) {
    return std::nullopt;
  }
  return d;
}

// The whole number a count field writes ("1200", "1.2e3", "+5"), exactly, from its decimal text:
// nullopt when it is not a whole number >= 0 or does not fit in 63 bits.
std::optional<std::int64_t> exact_count(std::string_view s) {
  if (!s.empty() && s.front() == '-') return std::nullopt;
  auto parts = decimal_text(s);
  if (!parts) return std::nullopt;
  std::string& digits = parts->digits;
  int exponent = parts->exponent;
  if (digits.find_first_not_of('0') == std::string::npos) return 0;
  for (; exponent < 0; ++exponent) {  // the digits below the units must be zeros
    if (digits.back() != '0') return std::nullopt;
    digits.pop_back();
    if (digits.empty()) digits = "0";
  }
  const std::size_t first = std::min(digits.find_first_not_of('0'), digits.size());
  digits.erase(0, first);
  if (digits.empty()) return 0;
  if (exponent > 19) return std::nullopt;
  digits.append(std::size_t(exponent), '0');
  std::int64_t v = 0;
  const auto [end, ec] = std::from_chars(digits.data(), digits.data() + digits.size(), v);
  if (ec != std::errc() || end != digits.data() + digits.size()) return std::nullopt;
  return v;
}

// Half a unit of the last digit a number's text writes ("12.345" -> 0.0005, "1.2e3" -> 50,
// "300" -> 0.5): the rounding its writer may have made. NaN when the text is not a decimal number
// or its last digit lies beyond a double's range ("0e400").
double half_last_digit(std::string_view s) {
  const auto parts = decimal_text(s);
  const double half = parts ? 0.5 * std::pow(10.0, parts->exponent) : 0.0;
  return half > 0 && std::isfinite(half) ? half : std::numeric_limits<double>::quiet_NaN();
}

// Whether the row is kept (no keep column: every row).
bool kept(const Table& t, const Row& r, const std::map<std::string, BoundColumn>& columns, DataFileInfo& info) {
  const auto it = columns.find("keep");
  if (it == columns.end()) return true;
  const std::string& s = r.fields[std::size_t(it->second.index)].text;
  if (s == "1") return true;
  if (s == "0") {
    ++info.skipped_rows;
    info.skipped_lines.push_back(r.line);
    return false;
  }
  bad_field(t, r, it->second, "1 (use the row) or 0 (a run the experiment rejected)");
}

DataFileInfo info_of(const Table& t, const std::map<std::string, BoundColumn>& columns, const std::string& main) {
  DataFileInfo info;
  info.file = t.file;
  for (const auto& n : t.names) info.columns.push_back(n.text);
  const auto it = columns.find(main);
  if (it != columns.end()) info.unit = it->second.unit;
  if (t.resolution) {
    Quantity q;
    try {
      q = parse_quantity(t.resolution->text);
    } catch (const InputError& e) {
      throw InputError("resolution", t.resolution->text, "an energy such as \"0.4 h*kHz\" (sigma of the work values)",
                       e.suggestion, t.file, t.resolution->line, t.resolution->column);
    }
    if (q.plain || !(q.dimension == Dimension::energy()) || !(q.value_si >= 0) || !std::isfinite(q.value_si))
      throw InputError("resolution", t.resolution->text,
                       "an energy >= 0 with its unit, such as \"0.4 h*kHz\" (sigma of the work values)", "", t.file,
                       t.resolution->line, t.resolution->column);
    info.resolution_J = q.value_si;
  }
  return info;
}

void require_rows(const Table& t, const DataFileInfo& info) {
  if (info.rows == 0)
    throw InputError("keep", "", "no rows left: every one of the " + std::to_string(info.skipped_rows) +
                                     " data rows has keep = 0",
                     "", t.file);
}

ColumnSpec energy_column(const std::string& base, bool main = true) {
  return {base, ColumnType::quantity, Dimension::energy(), true, main, base + "_h_kHz"};
}
const ColumnSpec keep_column{"keep", ColumnType::keep, {}, false, false, "keep"};

WorkSamplesData samples_from(const Table& t) {
  static const std::vector<ColumnSpec> specs = {energy_column("work"), keep_column};
  const auto columns = bind_columns(t, specs, "work samples");
  WorkSamplesData d;
  d.info = info_of(t, columns, "work");
  const BoundColumn& work = columns.at("work");
  for (const Row& r : t.rows) {
    const double w = quantity_field(t, r, work);  // checked before keep: a rejected row must still be well formed
    if (!kept(t, r, columns, d.info)) continue;
    d.work_J.push_back(w);
    d.precision_J.push_back(half_last_digit(r.fields[std::size_t(work.index)].text) * work.si_per_unit);
    d.lines.push_back(r.line);
  }
  d.info.rows = int(d.work_J.size());
  require_rows(t, d.info);
  return d;
}

LevelPairsData pairs_from(const Table& t) {
  static const std::vector<ColumnSpec> specs = {{"initial", ColumnType::integer, {}, true, false, "initial"},
                                                {"final", ColumnType::integer, {}, true, false, "final"},
                                                keep_column};
  const auto columns = bind_columns(t, specs, "level pairs");
  LevelPairsData d;
  d.info = info_of(t, columns, "");
  const std::string expected = "a level index: a whole number >= 0 (0 is the ground level)";
  for (const Row& r : t.rows) {
    const LevelPair p{integer_field(t, r, columns.at("initial"), expected),
                      integer_field(t, r, columns.at("final"), expected)};
    if (!kept(t, r, columns, d.info)) continue;
    d.runs.push_back(p);
    d.lines.push_back(r.line);
  }
  d.info.rows = int(d.runs.size());
  require_rows(t, d.info);
  return d;
}

// Populations become one level pair per run (compare's form): at most 2^24 runs (134 MB).
constexpr std::int64_t most_population_runs = std::int64_t(1) << 24;

LevelPairsData populations_from(const Table& t) {
  static const std::vector<ColumnSpec> specs = {{"initial", ColumnType::integer, {}, true, false, "initial"},
                                                {"final", ColumnType::integer, {}, true, false, "final"},
                                                {"population", ColumnType::number, {}, true, false, "population"},
                                                {"uncertainty", ColumnType::number, {}, true, false, "uncertainty"}};
  const auto columns = bind_columns(t, specs, "populations");
  LevelPairsData d;
  d.info = info_of(t, columns, "");
  const std::string expected = "a level index: a whole number >= 0 (0 is the ground level)";
  struct Cell {
    LevelPair pair;
    double population, uncertainty;
    int line;
  };
  std::vector<Cell> cells;
  std::map<std::pair<int, int>, int> seen;
  double sum = 0, variance = 0, information = 0;
  for (const Row& r : t.rows) {
    const LevelPair p{integer_field(t, r, columns.at("initial"), expected),
                      integer_field(t, r, columns.at("final"), expected)};
    const double population = number_field(t, r, columns.at("population"));
    if (!(population >= 0 && population <= 1))
      bad_field(t, r, columns.at("population"), "a population between 0 and 1 (the share of runs in this pair)");
    const double u = number_field(t, r, columns.at("uncertainty"));
    if (!(u > 0)) bad_field(t, r, columns.at("uncertainty"), "a standard uncertainty > 0");
    const auto [at, fresh] = seen.insert({{p.initial, p.final}, r.line});
    if (!fresh)
      throw InputError("initial", std::to_string(p.initial) + ", " + std::to_string(p.final),
                       "one row per level pair (this pair is also on line " + std::to_string(at->second) + ")", "",
                       t.file, r.line, r.fields[std::size_t(columns.at("initial").index)].column);
    cells.push_back({p, population, u, r.line});
    sum += population;
    variance += u * u;
    information += population * (1 - population);
  }
  // The populations are shares of one set of runs: their sum is 1 within the uncertainties (3 sigma).
  if (!(std::abs(sum - 1) <= 3 * std::sqrt(variance) + 1e-9))
    throw InputError("population", short_number(sum),
                     "populations summing to 1 within 3 x their combined uncertainty (" +
                         short_number(3 * std::sqrt(variance)) + "): every (initial, final) pair measured, as shares "
                         "of all runs",
                     "", t.file, t.header_line, t.names[std::size_t(columns.at("population").index)].column);
  // Runs: "# runs: N", else the effective number of binomial trials the uncertainties imply,
  // N = sum p(1-p) / sum u^2 (u^2 = p(1-p)/N for a share of N runs; common practice).
  double runs = 0;
  if (t.runs) {
    const auto n = exact_count(t.runs->text);
    if (!n || *n < 1 || *n > most_population_runs)
      throw InputError("runs", t.runs->text, "a whole number of runs, 1 to 2^24", "", t.file, t.runs->line,
                       t.runs->column);
    runs = double(*n);
    d.origin = "populations of " + t.runs->text + " runs ('# runs:' line)";
  } else {
    runs = std::round(information / variance);
    if (!(runs >= 1) || runs > double(most_population_runs))
      throw InputError("uncertainty", short_number(runs),
                       "uncertainties that imply between 1 and 2^24 runs (sum p(1-p) / sum u^2); or give '# runs: N'",
                       "", t.file, t.header_line, t.names[std::size_t(columns.at("uncertainty").index)].column);
    d.origin = "populations; " + short_number(runs) + " runs implied by the uncertainties (sum p(1-p) / sum u^2)";
  }
  for (const Cell& c : cells) {
    const auto count = std::int64_t(std::llround(c.population * runs));
    for (std::int64_t k = 0; k < count; ++k) {
      d.runs.push_back(c.pair);
      d.lines.push_back(c.line);
    }
  }
  d.info.rows = int(cells.size());
  if (d.runs.empty()) throw InputError("population", "0", "populations that give at least one run", "", t.file);
  return d;
}

WorkHistogramData histogram_from(const Table& t) {
  // No keep column: a binned run cannot be rejected any more.
  static const std::vector<ColumnSpec> specs = {energy_column("lower"), energy_column("upper"),
                                                {"count", ColumnType::number, {}, true, false, "count"}};
  const auto columns = bind_columns(t, specs, "histogram");
  WorkHistogramData d;
  d.info = info_of(t, columns, "lower");
  const BoundColumn &lower = columns.at("lower"), &upper = columns.at("upper"), &count = columns.at("count");
  std::int64_t total = 0;
  for (const Row& r : t.rows) {
    const double lo = quantity_field(t, r, lower), hi = quantity_field(t, r, upper);
    if (!(hi > lo)) bad_field(t, r, upper, "an upper edge above the lower edge of the bin");
    if (!d.edges_J.empty() && lo != d.edges_J.back())
      bad_field(t, r, lower,
                "the upper edge of the previous bin: bins must be contiguous and ascending (give empty bins a "
                "count of 0)");
    // Counts are whole numbers of runs, read exactly from their text and summed in 64 bits; a
    // count a double cannot hold exactly (above 2^53, e.g. 9007199254740993) would be changed
    // silently, so it is refused, as is a total above 2^63 runs.
    const double c = number_field(t, r, count);
    if (c < 0) bad_field(t, r, count, "a count >= 0");
    const std::optional<std::int64_t> whole = exact_count(r.fields[std::size_t(count.index)].text);
    if (!whole && c == std::floor(c) && c < 0x1p63)
      bad_field(t, r, count, "a whole number of runs that a double holds exactly (below 2^53 = 9007199254740992, "
                             "or a multiple of a power of 2 above it)");
    if (!whole) bad_field(t, r, count, c < 0x1p63 ? "a whole number of runs" : "a number of runs below 2^63");
    if (double(*whole) != c || !(c < 0x1p63) || static_cast<std::int64_t>(c) != *whole)
      bad_field(t, r, count, "a whole number of runs that a double holds exactly (below 2^53 = 9007199254740992, "
                             "or a multiple of a power of 2 above it)");
    if (*whole > std::numeric_limits<std::int64_t>::max() - total)
      bad_field(t, r, count, "counts whose total stays below 2^63 runs (the total so far is " +
                                 std::to_string(total) + ")");
    total += *whole;
    if (d.edges_J.empty()) d.edges_J.push_back(lo);
    d.edges_J.push_back(hi);
    d.counts.push_back(c);
  }
  d.info.rows = int(d.counts.size());
  return d;
}

TransitionLinesData transitions_from(const Table& t) {
  static const std::vector<ColumnSpec> specs = {
      {"lower", ColumnType::integer, {}, true, false, "lower"},
      {"upper", ColumnType::integer, {}, true, false, "upper"},
      {"frequency", ColumnType::quantity, Dimension::frequency(), true, true, "frequency_kHz"},
      {"uncertainty", ColumnType::quantity, Dimension::frequency(), true, true, "uncertainty_kHz"},
      {"linear_coefficient", ColumnType::quantity, Dimension::energy_per_length(1), false, false,
       "linear_coefficient_h_kHz/um"},
      keep_column};
  // The column was called force_<unit> before issue 16, though it holds F of V + F x, minus the
  // physical force: an old file is refused rather than read with a sign it may not mean.
  for (const Field& name : t.names)
    if (name.text == "force" || name.text.rfind("force_", 0) == 0)
      throw InputError(name.text, "",
                       "a linear_coefficient_<unit> column: the coefficient F of the term F x added to the trap "
                       "(V + F x), which is minus the physical force; rename the column, and flip the sign of its "
                       "values if they are the physical force",
                       "", t.file, t.header_line, name.column);
  const auto columns = bind_columns(t, specs, "transition lines");
  TransitionLinesData d;
  d.info = info_of(t, columns, "frequency");
  const std::string expected = "a level index: a whole number >= 0 (0 is the ground level)";
  for (const Row& r : t.rows) {
    MeasuredTransition m;
    m.line = r.line;
    m.lower = integer_field(t, r, columns.at("lower"), expected);
    m.upper = integer_field(t, r, columns.at("upper"), expected);
    if (m.upper <= m.lower) bad_field(t, r, columns.at("upper"), "a level above lower (" + std::to_string(m.lower) + ")");
    m.frequency_Hz = quantity_field(t, r, columns.at("frequency"));
    if (!(m.frequency_Hz > 0)) bad_field(t, r, columns.at("frequency"), "a transition frequency > 0");
    m.uncertainty_Hz = quantity_field(t, r, columns.at("uncertainty"));
    if (!(m.uncertainty_Hz > 0)) bad_field(t, r, columns.at("uncertainty"), "a standard uncertainty > 0");
    if (columns.count("linear_coefficient")) m.force_N = quantity_field(t, r, columns.at("linear_coefficient"));
    if (!kept(t, r, columns, d.info)) continue;
    d.transitions.push_back(m);
  }
  d.info.rows = int(d.transitions.size());
  require_rows(t, d.info);
  return d;
}

std::string read_text(const std::string& path) {
  return read_text_file(path, "the data file");
}

}  // namespace

WorkSamplesData read_work_samples_text(std::string_view text, const std::string& file_name) {
  return samples_from(split_table(text, file_name));
}
WorkSamplesData read_work_samples(const std::string& path) {
  return read_work_samples_text(read_text(path), path);
}

LevelPairsData read_level_pairs_text(std::string_view text, const std::string& file_name) {
  return pairs_from(split_table(text, file_name));
}
LevelPairsData read_level_pairs(const std::string& path) {
  return read_level_pairs_text(read_text(path), path);
}

WorkHistogramData read_work_histogram_text(std::string_view text, const std::string& file_name) {
  return histogram_from(split_table(text, file_name));
}
WorkHistogramData read_work_histogram(const std::string& path) {
  return read_work_histogram_text(read_text(path), path);
}

TransitionLinesData read_transition_lines_text(std::string_view text, const std::string& file_name) {
  return transitions_from(split_table(text, file_name));
}
TransitionLinesData read_transition_lines(const std::string& path) {
  return read_transition_lines_text(read_text(path), path);
}

const DataFileInfo& WorkData::info() const {
  switch (kind) {
    case WorkDataKind::samples: return samples.info;
    case WorkDataKind::level_pairs: return pairs.info;
    case WorkDataKind::histogram: return histogram.info;
  }
  return samples.info;
}

WorkData read_work_data_text(std::string_view text, const std::string& file_name) {
  const Table t = split_table(text, file_name);
  bool work = false, pairs = false, bins = false, populations = false;
  for (const auto& n : t.names) {
    work = work || n.text == "work" || n.text.rfind("work_", 0) == 0;
    pairs = pairs || n.text == "initial" || n.text == "final";
    bins = bins || n.text == "count";
    populations = populations || n.text == "population";
  }
  WorkData d;
  if (int(work) + int(pairs) + int(bins) != 1)
    throw InputError("", "", "a header that fits no kind of work data: expected work samples (work_<unit>), "
                             "level pairs (initial, final), populations (initial, final, population, uncertainty) "
                             "or a histogram (lower_<unit>, upper_<unit>, count)",
                     "", file_name, t.header_line, 1);
  if (work) {
    d.kind = WorkDataKind::samples;
    d.samples = samples_from(t);
  } else if (pairs) {
    d.kind = WorkDataKind::level_pairs;
    d.pairs = populations ? populations_from(t) : pairs_from(t);
  } else {
    d.kind = WorkDataKind::histogram;
    d.histogram = histogram_from(t);
  }
  return d;
}
WorkData read_work_data(const std::string& path) {
  return read_work_data_text(read_text(path), path);
}

}  // namespace trapwork
