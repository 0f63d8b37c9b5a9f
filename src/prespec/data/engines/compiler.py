"""The reduction compiled to SQL: the matching rule of ``matching.py``, exactly, per dialect.

A cell is blank when it is NULL (or a NaN in a floating column) or its trimmed text is empty;
"trimmed" strips the characters Python's ``str.strip()`` strips (``WHITESPACE``), not only the
space. A non-blank cell matches a plan value that is a number when the cell is a number equal
to it: a text cell is a number only when its trimmed text fully matches
``matching._NUMBER`` (checked by a regular expression before the cast, since SQL casts also
accept forms such as ``1_000``, ``inf`` or ``nan``); it matches a plan value that is not a
number when the trimmed texts are equal, byte for byte. Every value of the plan is a bound
parameter; column and table names go through ``quote_identifier``. Nothing of the plan is
pasted into the text.

Each ``compile_*`` function returns a ``Query``: the SQL text with named placeholders in the
dialect's style (DuckDB ``$p1``; PostgreSQL through SQLAlchemy and Spark SQL ``:p1``) and the
parameters by name. Column kinds (``types``): ``text``, ``integer``, ``float``, ``bool``,
``binary`` (bytes, read as UTF-8 text: ``columns.py``) or ``other`` (cast to text); a CSV read
as text has only ``text`` columns.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from prespec.common.matching import as_number, as_text

from .base import FAILED_COLUMN, KEEP_COLUMN, WEIGHT_COLUMN, ColumnMap, CountRequest, Filter
from .columns import UTF8_HEX_PATTERN

DIALECTS: tuple[str, ...] = ("duckdb", "postgresql", "spark")
COLUMN_KINDS: tuple[str, ...] = ("text", "integer", "float", "bool", "binary", "other")
# what str.strip() removes: every character for which str.isspace() holds (a test checks the
# list against Python's own, which takes a second to compute at import)
WHITESPACE = ("\t\n\x0b\x0c\r\x1c\x1d\x1e\x1f \x85\xa0\u1680\u2000\u2001\u2002\u2003\u2004"
              "\u2005\u2006\u2007\u2008\u2009\u200a\u2028\u2029\u202f\u205f\u3000")
# matching._NUMBER, anchored; the same syntax in RE2 (DuckDB), ARE (PostgreSQL) and Java (Spark)
NUMBER_PATTERN = r"^[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?$"
FIELD_SEPARATOR = "\x1f"  # between the fields of a row's fingerprint line
LOCATE_COMBINATIONS = 200  # at most this many weighted rows are looked up for an error's ids


@dataclass(frozen=True)
class Query:
    """SQL text with named placeholders, and the values bound to them."""

    text: str
    params: dict[str, Any]
    dialect: str


def quote_identifier(name: str, dialect: str) -> str:
    """A column or table name as a quoted identifier; names holding a NUL are refused.

    DuckDB and PostgreSQL double the quote inside ``"…"``; Spark doubles it inside `…`.
    A dotted table name is given as separate parts (``quote_table``), never split here.
    """
    if not isinstance(name, str) or "\x00" in name:
        raise ValueError(f"column or table name {name!r} cannot be quoted (it holds a NUL)")
    if dialect == "spark":
        return "`" + name.replace("`", "``") + "`"
    _check_dialect(dialect)
    return '"' + name.replace('"', '""') + '"'


def quote_table(name: str, dialect: str) -> str:
    """``schema.table`` (or a plain table name) with every part quoted."""
    return ".".join(quote_identifier(part, dialect) for part in name.split("."))


def _check_dialect(dialect: str) -> None:
    if dialect not in DIALECTS:
        raise ValueError(f"unknown SQL dialect {dialect!r} (known: {', '.join(DIALECTS)})")


class _Sql:
    """Builds expressions of one dialect, binding every value as a named parameter."""

    def __init__(self, dialect: str, types: Mapping[str, str]) -> None:
        _check_dialect(dialect)
        self.dialect = dialect
        self.types = types
        self.params: dict[str, Any] = {}
        self._by_value: dict[tuple[type, Any], str] = {}

    # -- parameters and names ---------------------------------------------------------------
    def bind(self, value: Any) -> str:
        """A placeholder for ``value`` (one parameter per distinct value and type)."""
        key = (type(value), value)
        name = self._by_value.get(key)
        if name is None:
            name = f"p{len(self.params) + 1}"
            self.params[name] = value
            self._by_value[key] = name
        return f"${name}" if self.dialect == "duckdb" else f":{name}"

    def ident(self, name: str) -> str:
        return quote_identifier(name, self.dialect)

    def kind(self, column: str) -> str:
        kind = self.types.get(column, "text")
        return kind if kind in COLUMN_KINDS else "other"

    # -- dialect pieces ---------------------------------------------------------------------
    @property
    def text_type(self) -> str:
        return {"duckdb": "VARCHAR", "postgresql": "text", "spark": "STRING"}[self.dialect]

    @property
    def collate(self) -> str:
        """Byte-wise ordering and comparison of text (PostgreSQL's default depends on locale)."""
        return ' COLLATE "C"' if self.dialect == "postgresql" else ""

    def _trim(self, expr: str) -> str:
        """``expr`` stripped as ``str.strip()`` does. The trim by the 29 characters is slow, so
        it runs only where the first or the last character is not a printable ASCII one (an
        empty text included): whitespace is never printable ASCII."""
        ws = self.bind(WHITESPACE)
        if self.dialect == "duckdb":
            trimmed = f"trim({expr}, {ws})"
        elif self.dialect == "postgresql":
            trimmed = f"btrim({expr}, {ws})"
        else:
            trimmed = f"trim(BOTH {ws} FROM {expr})"
        if self.dialect == "duckdb":
            first, last = f"ord({expr}[1])", f"ord({expr}[-1])"
        elif self.dialect == "postgresql":
            first, last = f"ascii({expr})", f"ascii(right({expr}, 1))"
        else:
            first, last = f"ascii({expr})", f"ascii(substring({expr}, -1, 1))"
        low, high = self.bind(33), self.bind(126)
        plain = (f"{first} BETWEEN {low} AND {high} AND {last} BETWEEN {low} AND {high}")
        return f"(CASE WHEN {plain} THEN {expr} ELSE {trimmed} END)"

    def hash(self, expr: str) -> str:
        """A 64-bit hash of a text (equal texts, equal hashes)."""
        if self.dialect == "duckdb":
            return f"hash({expr})"
        if self.dialect == "postgresql":
            return f"hashtextextended({expr}, 0)"
        return f"xxhash64({expr})"

    def _regex(self, expr: str, regex: str = NUMBER_PATTERN) -> str:
        pattern = self.bind(regex)
        if self.dialect == "duckdb":
            return f"regexp_matches({expr}, {pattern})"
        if self.dialect == "postgresql":
            return f"({expr} ~ {pattern})"
        return f"({expr} RLIKE {pattern})"

    def _to_double(self, text: str) -> str:
        """A text that matched NUMBER_PATTERN as a double; NULL where it overflows."""
        if self.dialect == "duckdb":
            return f"TRY_CAST({text} AS DOUBLE)"
        if self.dialect == "spark":
            return f"try_cast({text} AS DOUBLE)"
        big = self.bind("1e308")
        return (f"CASE WHEN abs(CAST({text} AS numeric)) < CAST({big} AS numeric) "
                f"THEN CAST({text} AS double precision) END")

    # -- the matching rule ------------------------------------------------------------------
    def text(self, column: str) -> str:
        """The cell's trimmed text, as ``matching.as_text`` writes it (undefined if blank)."""
        x, kind = self.ident(column), self.kind(column)
        if kind == "text":
            return self._trim(x)
        if kind == "integer":
            return f"CAST({x} AS {self.text_type})"
        if kind == "float":
            bigint = "BIGINT"
            limit = self.bind(1e16)
            return (f"CASE WHEN ({x} - {x}) = 0 AND {x} = floor({x}) AND abs({x}) < {limit} "
                    f"THEN CAST(CAST({x} AS {bigint}) AS {self.text_type}) "
                    f"ELSE CAST({x} AS {self.text_type}) END")
        if kind == "bool":
            return f"CASE WHEN {x} THEN {self.bind('True')} ELSE {self.bind('False')} END"
        if kind == "binary":
            return self._trim(self.decoded(x))
        return self._trim(f"CAST({x} AS {self.text_type})")

    def decoded(self, x: str) -> str:
        """Bytes as UTF-8 text (checked first by ``compile_bad_bytes``: never invalid here)."""
        if self.dialect == "duckdb":
            return f"decode({x})"
        if self.dialect == "postgresql":
            return f"convert_from({x}, {self.bind('UTF8')})"
        return f"decode({x}, {self.bind('UTF-8')})"

    def not_text(self, column: str) -> str:
        """TRUE for a non-NULL bytes cell that is not UTF-8 text or holds a NUL
        (``columns.UTF8_HEX_PATTERN``; Spark: the bytes do not survive a decoding and an
        encoding, as Java's strict decoder replaces what is malformed)."""
        x = self.ident(column)
        if self.dialect == "duckdb":
            valid = f"regexp_matches(lower(hex({x})), {self.bind(UTF8_HEX_PATTERN)})"
        elif self.dialect == "postgresql":
            valid = f"(encode({x}, {self.bind('hex')}) ~ {self.bind(UTF8_HEX_PATTERN)})"
        else:
            text = self.decoded(x)
            valid = (f"(encode({text}, {self.bind('UTF-8')}) = {x} AND "
                     f"instr({text}, char(0)) = 0)")
        return f"({x} IS NOT NULL AND NOT {valid})"

    def blank(self, column: str) -> str:
        """TRUE for a blank cell, FALSE otherwise (never NULL)."""
        x, kind = self.ident(column), self.kind(column)
        if kind == "text":
            return f"({x} IS NULL OR {self.text(column)} = {self.bind('')})"
        if kind == "float":  # NaN: the only value not equal to itself, except on PostgreSQL
            nan = (f"{x} = CAST({self.bind('NaN')} AS double precision)"
                   if self.dialect == "postgresql" else f"isnan({x})")
            return f"({x} IS NULL OR {nan})"
        if kind in ("other", "binary"):
            return f"({x} IS NULL OR {self.text(column)} = {self.bind('')})"
        return f"({x} IS NULL)"

    def number(self, column: str) -> str:
        """The cell as a finite double, NULL where it is not a plain number."""
        x, kind = self.ident(column), self.kind(column)
        if kind in ("text", "binary", "other"):
            t = self.text(column)
            return f"CASE WHEN {self._regex(t)} THEN {self._to_double(t)} END"
        if kind == "integer":
            return f"CAST({x} AS DOUBLE{' PRECISION' if self.dialect == 'postgresql' else ''})"
        if kind == "float":
            return f"CASE WHEN ({x} - {x}) = 0 THEN {x} END"
        return "NULL"

    def matches(self, column: str, values: Iterable[Any]) -> str:
        """TRUE when the (non-blank) cell matches one of the plan values, else FALSE."""
        numbers: list[float] = []
        texts: list[str] = []
        for value in values:
            number = as_number(value)
            if number is not None:
                numbers.append(number)
            else:
                texts.append(as_text(value))
        parts = []
        if numbers:
            if self.kind(column) in ("text", "binary", "other"):
                # the plain spelling of the number first: a cheap test that implies equality
                shown = ", ".join(self.bind(as_text(n)) for n in dict.fromkeys(numbers))
                parts.append(f"{self.text(column)} IN ({shown})")
            listed = ", ".join(self.bind(n) for n in dict.fromkeys(numbers))
            parts.append(f"{self.number(column)} IN ({listed})")
        if texts:
            listed = ", ".join(self.bind(t) for t in dict.fromkeys(texts))
            parts.append(f"{self.text(column)} IN ({listed})")
        if not parts:
            return "FALSE"
        return f"COALESCE(NOT {self.blank(column)} AND ({' OR '.join(parts)}), FALSE)"

    def condition(self, f: Filter) -> str:
        """One population condition as a boolean (prepare.cell_predicate)."""
        if f.op == "is_missing":
            return self.blank(f.column) if f.arg else f"NOT {self.blank(f.column)}"
        if f.op in ("in", "equals"):
            return self.matches(f.column, f.arg if f.op == "in" else [f.arg])
        if f.op == "not_in":
            return f"(NOT {self.blank(f.column)} AND NOT {self.matches(f.column, f.arg)})"
        if f.op == "between":
            low, high = f.arg
            lo_n, hi_n = as_number(low), as_number(high)
            if lo_n is not None and hi_n is not None:
                n = self.number(f.column)
                test = f"{n} BETWEEN {self.bind(lo_n)} AND {self.bind(hi_n)}"
            else:  # text order, byte-wise, as Python compares str
                t = f"{self.text(f.column)}{self.collate}"
                test = (f"{t} >= {self.bind(str(low))}{self.collate} AND "
                        f"{t} <= {self.bind(str(high))}{self.collate}")
            return f"COALESCE(NOT {self.blank(f.column)} AND ({test}), FALSE)"
        raise ValueError(f"unknown condition {f.op!r}")

    def failed(self, include: Sequence[Filter]) -> str:
        """The first condition a row fails, 1-based in the plan's order; 0 when it passes all."""
        if not include:
            return self.bind(0)
        whens = " ".join(f"WHEN NOT ({self.condition(f)}) THEN {self.bind(i)}"
                         for i, f in enumerate(include, start=1))
        return f"CASE {whens} ELSE {self.bind(0)} END"

    def keep(self, include: Sequence[Filter]) -> str:
        if not include:
            return "TRUE"
        return " AND ".join(f"({self.condition(f)})" for f in include)

    def mapped(self, m: ColumnMap) -> str:
        """The canonical plan value of the first matching label, NULL if blank, else the text."""
        whens = [f"WHEN {self.blank(m.column)} THEN NULL"]
        for label, values in m.labels:
            whens.append(f"WHEN {self.matches(m.column, values)} THEN {self.bind(label)}")
        return f"CASE {' '.join(whens)} ELSE {self.text(m.column)} END"

    def raw(self, column: str) -> str:
        """The cell itself (text trimmed, numbers as they are), NULL if blank."""
        kind = self.kind(column)
        value = self.ident(column) if kind in ("integer", "float", "bool") else self.text(column)
        return f"CASE WHEN {self.blank(column)} THEN NULL ELSE {value} END"

    def field(self, column: str) -> str:
        """A fingerprint field: the trimmed text, empty when blank."""
        return f"CASE WHEN {self.blank(column)} THEN {self.bind('')} ELSE {self.text(column)} END"


def _grouped_exprs(sql: _Sql, request: CountRequest) -> list[tuple[str, str]]:
    return ([(m.column, sql.mapped(m)) for m in request.mapped]
            + [(c, sql.raw(c)) for c in request.raw])


def _kept_only(sql: _Sql, request: CountRequest, keep: str, column: str) -> str:
    """A grouped column as the weighted frame holds it: NULL for excluded rows, except the
    group column, by which the participant flow counts the excluded rows."""
    if column == request.group:
        return sql.ident(column)
    return f"CASE WHEN {keep} THEN {sql.ident(column)} END AS {sql.ident(column)}"


def compile_counts(request: CountRequest, relation: str, dialect: str,
                   types: Mapping[str, str]) -> Query:
    """The one aggregate query: per distinct (kept, mapped and raw values), the row count.

    ``relation``: the FROM item, already quoted or a table function (``read_csv(...)``).
    Columns: ``KEEP_COLUMN``, ``FAILED_COLUMN``, the request's grouped columns,
    ``WEIGHT_COLUMN``; excluded rows have NULL in every grouped column but the group, so they
    collapse into one row per condition failed and group.
    """
    sql = _Sql(dialect, types)
    keep = sql.keep(request.include)
    failed = sql.failed(request.include)
    exprs = _grouped_exprs(sql, request)
    k, f = sql.ident(KEEP_COLUMN), sql.ident(FAILED_COLUMN)
    inner = ", ".join([f"{keep} AS {k}", f"{failed} AS {f}"]
                      + [f"{e} AS {sql.ident(c)}" for c, e in exprs])
    outer_cols = [k, f] + [_kept_only(sql, request, k, c) for c, _ in exprs]
    positions = ", ".join(str(i) for i in range(1, len(outer_cols) + 1))
    text = (f"SELECT {', '.join(outer_cols)}, COUNT(*) AS {sql.ident(WEIGHT_COLUMN)} "
            f"FROM (SELECT {inner} FROM {relation}) AS prespec_rows GROUP BY {positions}")
    return Query(text, sql.params, dialect)


def compile_bad_bytes(columns: Sequence[str], relation: str, dialect: str,
                      types: Mapping[str, str]) -> Query:
    """Per bytes column, how many cells are not UTF-8 text (``_Sql.not_text``): one row."""
    sql = _Sql(dialect, types)
    one, zero = sql.bind(1), sql.bind(0)
    sums = ", ".join(f"SUM(CASE WHEN {sql.not_text(c)} THEN {one} ELSE {zero} END) AS "
                     f"{sql.ident(c)}" for c in columns)
    return Query(f"SELECT {sums} FROM {relation}", sql.params, dialect)


def compile_rows(request: CountRequest, relation: str, dialect: str,
                 types: Mapping[str, str]) -> Query:
    """The cells of every column the request reads, every row; bytes as UTF-8 text."""
    sql = _Sql(dialect, types)
    cells = ", ".join(f"{sql.decoded(sql.ident(c))} AS {sql.ident(c)}"
                      if sql.kind(c) == "binary" else sql.ident(c) for c in request.read)
    return Query(f"SELECT {cells} FROM {relation}", sql.params, dialect)


SET_COLUMN = "prespec_set"  # 1: a row of counts; 0: an id hash seen more than once
HASH_COLUMN = "prespec_id_hash"
BLANK_COLUMN = "prespec_blank_ids"


def compile_reduction(request: CountRequest, relation: str, dialect: str,
                      types: Mapping[str, str]) -> Query:
    """The whole reduction in one statement and one pass over the rows.

    The rows are grouped twice at once (GROUPING SETS): by the raw cells of every column the
    counts need, and by a 64-bit hash of the id's trimmed text (with the ``unique_within``
    columns). Only then are the population filter and the mappings applied, once per
    distinct combination of raw cells, and the combinations regrouped by their mapped values.
    Rows with ``SET_COLUMN`` = 1 are the weighted frame (``KEEP_COLUMN``, the grouped
    columns, ``WEIGHT_COLUMN``, and ``BLANK_COLUMN``: rows with a blank id); rows with 0 hold
    a hash shared by several rows (a duplicate id, or a collision: confirm with
    ``compile_duplicate_ids``).
    """
    sql = _Sql(dialect, types)
    h, b, n = sql.ident(HASH_COLUMN), sql.ident(BLANK_COLUMN), sql.ident(SET_COLUMN)
    raw = ", ".join(sql.ident(c) for c in count_inputs(request))
    cells = _cells(sql, request, relation)
    grouped = (f"SELECT GROUPING({h}) AS {n}, {h}" + (f", {raw}" if raw else "")
               + f", COUNT(*) AS {sql.ident(ROWS_COLUMN)}, SUM({b}) AS {b} FROM ({cells}) AS "
               f"prespec_cells GROUP BY GROUPING SETS (({raw}), ({h}))")
    return Query(_mapping(sql, request, f"({grouped}) AS prespec_groups"), sql.params, dialect)


ROWS_COLUMN = "prespec_rows"


def count_inputs(request: CountRequest) -> list[str]:
    """The columns whose raw cells the reduction groups by: the filters' and the counted."""
    return list(dict.fromkeys([f.column for f in request.include] + list(request.grouped)))


def _cells(sql: _Sql, request: CountRequest, relation: str) -> str:
    """Per row: the hash of the id's trimmed text (NULL when blank), 1 for a blank id, and the
    raw cells of ``count_inputs``."""
    h, b = sql.ident(HASH_COLUMN), sql.ident(BLANK_COLUMN)
    t = sql.ident("prespec_id_text")
    raw = ", ".join(sql.ident(c) for c in count_inputs(request))
    one, zero, empty = sql.bind(1), sql.bind(0), sql.bind("")
    key = t
    if request.unique_within:
        sep = sql.bind(FIELD_SEPARATOR)
        key = f" || {sep} || ".join([t] + [sql.field(c) for c in request.unique_within])
    inputs = count_inputs(request)
    within = "".join(f", {sql.ident(c)}" for c in request.unique_within if c not in inputs)
    # the id's text once per row (NULL when blank), then its hash
    texts = (f"SELECT CASE WHEN {sql.blank(request.id)} THEN NULL ELSE {sql.text(request.id)} "
             f"END AS {t}" + (f", {raw}" if raw else "") + within + f" FROM {relation}")
    blank_id = f"({t} IS NULL OR {t} = {empty})"
    return (f"SELECT CASE WHEN {blank_id} THEN NULL ELSE {sql.hash(key)} END AS {h}, "
            f"CASE WHEN {blank_id} THEN {one} ELSE {zero} END AS {b}"
            + (f", {raw}" if raw else "") + f" FROM ({texts}) AS prespec_texts")


def _mapping(sql: _Sql, request: CountRequest, groups: str) -> str:
    """The filter and the mappings over grouped raw cells (``groups``: a FROM item with
    SET_COLUMN, HASH_COLUMN, the inputs, ROWS_COLUMN and BLANK_COLUMN), regrouped."""
    h, b, n = sql.ident(HASH_COLUMN), sql.ident(BLANK_COLUMN), sql.ident(SET_COLUMN)
    k, w, r = sql.ident(KEEP_COLUMN), sql.ident(WEIGHT_COLUMN), sql.ident(ROWS_COLUMN)
    one = sql.bind(1)
    exprs = _grouped_exprs(sql, request)
    f = sql.ident(FAILED_COLUMN)
    mapped = (f"SELECT {n}, {h}, {sql.keep(request.include)} AS {k}, "
              f"{sql.failed(request.include)} AS {f}"
              + "".join(f", {e} AS {sql.ident(c)}" for c, e in exprs)
              + f", {r}, {b} FROM {groups} "
              f"WHERE {n} = {one} OR ({h} IS NOT NULL AND {r} > {one})")
    outer = [n, h, k, f] + [_kept_only(sql, request, k, c) for c, _ in exprs]
    positions = ", ".join(str(i) for i in range(1, len(outer) + 1))
    return (f"SELECT {', '.join(outer)}, SUM({r}) AS {w}, SUM({b}) AS {b} "
            f"FROM ({mapped}) AS prespec_mapped GROUP BY {positions}")


def compile_cells(request: CountRequest, relation: str, dialect: str,
                  types: Mapping[str, str]) -> Query:
    """One row per source row: HASH_COLUMN, BLANK_COLUMN and the raw cells of
    ``count_inputs`` (for an engine that groups them itself, e.g. batch by batch)."""
    sql = _Sql(dialect, types)
    return Query(_cells(sql, request, relation), sql.params, dialect)


def compile_id_hashes(request: CountRequest, relation: str, dialect: str,
                      types: Mapping[str, str]) -> Query:
    """One row per source row, one column HASH_COLUMN: the 64-bit hash of the id's trimmed
    text (with the ``unique_within`` fields, as ``compile_cells``), and for every blank id
    the hash of NULL (``compile_blank_hash``): nothing else is computed per row."""
    sql = _Sql(dialect, types)
    t = sql.ident("prespec_id_text")
    text = sql.text(request.id)
    if sql.kind(request.id) == "float":  # NaN is blank too
        text = f"CASE WHEN {sql.blank(request.id)} THEN NULL ELSE {text} END"
    key = f"NULLIF({t}, {sql.bind('')})"  # blank: NULL, or empty once trimmed
    if request.unique_within:  # NULL || ... is NULL: a blank id still hashes as NULL
        sep = sql.bind(FIELD_SEPARATOR)
        key = f" || {sep} || ".join([key] + [sql.field(c) for c in request.unique_within])
    within = "".join(f", {sql.ident(c)}" for c in dict.fromkeys(request.unique_within))
    text = (f"SELECT {sql.hash(key)} AS {sql.ident(HASH_COLUMN)} FROM (SELECT "
            f"{text} AS {t}{within} FROM {relation}) AS prespec_texts")
    return Query(text, sql.params, dialect)


def compile_blank_hash(dialect: str) -> Query:
    """The hash ``compile_id_hashes`` gives a blank id (one row, column HASH_COLUMN)."""
    sql = _Sql(dialect, {})
    return Query(f"SELECT {sql.hash(f'CAST(NULL AS {sql.text_type})')} AS "
                 f"{sql.ident(HASH_COLUMN)}", {}, dialect)


def compile_mapping(request: CountRequest, relation: str, dialect: str,
                    types: Mapping[str, str]) -> Query:
    """The weighted frame from a relation of grouped raw cells (the columns of
    ``compile_cells`` grouped, with SET_COLUMN = 1 and ROWS_COLUMN), as ``compile_reduction``
    ends."""
    sql = _Sql(dialect, types)
    return Query(_mapping(sql, request, f"{relation} AS prespec_groups"), sql.params, dialect)


def compile_blank_ids(request: CountRequest, relation: str, dialect: str,
                      types: Mapping[str, str]) -> Query:
    """How many rows have a blank id (one row, one column ``n``)."""
    sql = _Sql(dialect, types)
    text = f"SELECT COUNT(*) AS n FROM {relation} WHERE {sql.blank(request.id)}"
    return Query(text, sql.params, dialect)


def compile_duplicate_ids(request: CountRequest, relation: str, dialect: str,
                          types: Mapping[str, str], show: int = 5) -> Query:
    """The first ``show`` duplicated ids (as trimmed text, byte order) with their counts, and
    how many ids are duplicated: columns ``id``, the ``unique_within`` columns, ``n``, ``total``.
    Ids need be unique only within each combination of ``unique_within`` values."""
    sql = _Sql(dialect, types)
    keys = [f"{sql.text(request.id)} AS prespec_id"]
    keys += [f"{sql.raw(c)} AS {sql.ident(c)}" for c in request.unique_within]
    positions = ", ".join(str(i) for i in range(1, len(keys) + 1))
    order = ", ".join([f"prespec_id{sql.collate}"]
                      + [sql.ident(c) for c in request.unique_within])
    within = "".join(f", {sql.ident(c)}" for c in request.unique_within)
    text = (f"SELECT prespec_id AS id{within}, n, COUNT(*) OVER () AS total FROM "
            f"(SELECT {', '.join(keys)}, COUNT(*) AS n FROM {relation} "
            f"WHERE NOT {sql.blank(request.id)} GROUP BY {positions} HAVING COUNT(*) > 1) "
            f"AS prespec_dups ORDER BY {order} LIMIT {int(show)}")
    return Query(text, sql.params, dialect)


def compile_locate(request: CountRequest, relation: str, dialect: str,
                   types: Mapping[str, str], rows: Sequence[Mapping[str, Any]],
                   show: int = 5) -> Query:
    """The first ``show`` ids (trimmed text, byte order) of source rows that the given rows of
    the weighted frame stand for (each a mapping of grouped column to its value; kept rows).
    At most ``LOCATE_COMBINATIONS`` rows are looked up."""
    sql = _Sql(dialect, types)
    exprs = dict(_grouped_exprs(sql, request))
    keep = sql.keep(request.include)
    alternatives = []
    for row in list(rows)[:LOCATE_COMBINATIONS]:
        terms = [f"({keep})"]
        for column, expr in exprs.items():
            value = row.get(column)
            if value is None:
                terms.append(f"({expr}) IS NULL")
            else:
                terms.append(f"({expr}) = {sql.bind(_plain(value))}")
        alternatives.append("(" + " AND ".join(terms) + ")")
    where = " OR ".join(alternatives) or "FALSE"
    # a subquery: PostgreSQL's ORDER BY takes a collated expression of input columns only
    text = (f"SELECT id FROM (SELECT {sql.text(request.id)} AS id FROM {relation} "
            f"WHERE {where}) AS prespec_found ORDER BY id{sql.collate} LIMIT {int(show)}")
    return Query(text, sql.params, dialect)


def compile_row_lines(request: CountRequest, relation: str, dialect: str,
                      types: Mapping[str, str]) -> Query:
    """One line per source row for the data fingerprint, in order (``fingerprint.py``).

    A line joins the trimmed text of the id and of every other column read (``request.read``
    order; empty when blank) with ``FIELD_SEPARATOR``; rows are ordered by the id's text, then
    the line, byte-wise. Column ``line``.
    """
    sql = _Sql(dialect, types)
    sep = sql.bind(FIELD_SEPARATOR)
    fields = [sql.field(c) for c in request.read]
    line = f" || {sep} || ".join(fields)
    text = (f"SELECT line, prespec_id FROM (SELECT {line} AS line, {sql.field(request.id)} "
            f"AS prespec_id FROM {relation}) AS prespec_lines "
            f"ORDER BY prespec_id{sql.collate}, line{sql.collate}")
    return Query(text, sql.params, dialect)


def _plain(value: Any) -> Any:
    """A numpy scalar as the Python value a database driver binds."""
    item = getattr(value, "item", None)
    return item() if callable(item) else value


def positional(query: Query) -> tuple[str, list[Any]]:
    """A DuckDB query with ``?`` placeholders and its values in order (for drivers that take
    only positional parameters)."""
    import re

    if query.dialect != "duckdb":
        raise ValueError("positional(): only DuckDB queries use $name placeholders")
    values: list[Any] = []

    def swap(match: re.Match[str]) -> str:
        values.append(query.params[match.group(1)])
        return "?"

    return re.sub(r"\$(p\d+)\b", swap, query.text), values


@dataclass(frozen=True)
class EventJoin:
    """What the join of a unit table and an event table reads (``prespec.data.events``):
    the unit id, group and population filter of the unit table, and the id, level and
    (optional) within columns of the event table; ``levels``: the declared levels the level
    column is matched to (None: each level as its trimmed text)."""

    unit_id: str
    group: str
    groups: tuple[str, ...]
    include: tuple[Filter, ...]
    event_id: str
    level: str
    within: str | None
    levels: tuple[str, ...] | None


def compile_event_tally(join: EventJoin, units: str, events: str, dialect: str,
                        unit_types: Mapping[str, str], event_types: Mapping[str, str]) -> Query:
    """The tally of a family over the event table in one statement: the join of the two
    tables by the ids' trimmed text, then per kind (``prespec.data.events``) the counts.

    ``units`` and ``events``: the FROM items of the two tables. Columns: kind, level, within,
    arm, n. The units are distinct by id (the unit table's reduction refuses a repeated id)."""
    sql = _Sql(dialect, unit_types)
    esql = _Sql(dialect, event_types)
    esql.params, esql._by_value = sql.params, sql._by_value  # one set of parameters
    text_type = sql.text_type
    arm = sql.mapped(ColumnMap(join.group, tuple((g, (g,)) for g in join.groups)))
    listed = ", ".join(sql.bind(g) for g in join.groups)
    u_id = f"CASE WHEN {sql.blank(join.unit_id)} THEN NULL ELSE {sql.text(join.unit_id)} END"
    unit_rows = (f"SELECT {u_id} AS u_id, {arm} AS u_arm, {sql.keep(join.include)} AS u_keep "
                 f"FROM {units}")
    e_id = (f"CASE WHEN {esql.blank(join.event_id)} THEN NULL ELSE "
            f"{esql.text(join.event_id)} END")
    if join.levels is not None:
        level = esql.mapped(ColumnMap(join.level, tuple((t, (t,)) for t in join.levels)))
    else:
        level = f"CASE WHEN {esql.blank(join.level)} THEN NULL ELSE {esql.text(join.level)} END"
    within = (f"CASE WHEN {esql.blank(join.within)} THEN NULL ELSE {esql.text(join.within)} END"
              if join.within is not None else f"CAST(NULL AS {text_type})")
    event_rows = f"SELECT {e_id} AS e_id, {level} AS e_level, {within} AS e_within FROM {events}"
    none = f"CAST(NULL AS {text_type})"
    one, zero = sql.bind(1), sql.bind(0)
    kinds = {k: f"CAST({sql.bind(k)} AS {text_type})"
             for k in ("units", "events", "pairs", "unmatched", "blank", "outside")}
    inside = f"COALESCE(u_keep AND u_arm IN ({listed}), FALSE)"
    text = (
        f"WITH prespec_units AS (SELECT u_id, u_arm, {inside} AS u_in FROM ({unit_rows}) AS "
        f"prespec_u WHERE u_id IS NOT NULL), prespec_events AS ({event_rows}), "
        f"prespec_joined AS (SELECT e_id, e_level, e_within, u_id IS NOT NULL AS matched, "
        f"COALESCE(u_in, FALSE) AS u_in, u_arm FROM prespec_events LEFT JOIN prespec_units "
        f"ON e_id = u_id) "
        f"SELECT {kinds['units']} AS kind, {none} AS level, {none} AS within, u_arm AS arm, "
        f"COUNT(*) AS n FROM prespec_units WHERE u_in GROUP BY u_arm "
        f"UNION ALL SELECT {kinds['events']}, e_level, e_within, u_arm, COUNT(DISTINCT e_id) "
        f"FROM prespec_joined WHERE u_in AND e_level IS NOT NULL "
        f"GROUP BY e_level, e_within, u_arm "
        f"UNION ALL SELECT {kinds['pairs']}, e_level, e_within, {none}, COUNT(*) "
        f"FROM prespec_joined WHERE matched AND e_level IS NOT NULL GROUP BY e_level, e_within "
        f"UNION ALL SELECT {kinds['unmatched']}, e_id, {none}, {none}, COUNT(*) "
        f"FROM prespec_joined WHERE NOT matched GROUP BY e_id "
        f"UNION ALL SELECT {kinds['blank']}, {none}, {none}, {none}, "
        f"SUM(CASE WHEN matched AND e_level IS NULL THEN {one} ELSE {zero} END) "
        f"FROM prespec_joined "
        f"UNION ALL SELECT {kinds['outside']}, {none}, {none}, {none}, "
        f"SUM(CASE WHEN matched AND NOT u_in THEN {one} ELSE {zero} END) FROM prespec_joined")
    return Query(text, sql.params, dialect)
