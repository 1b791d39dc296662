"""Row filters: a small boolean language, parsed by hand and compiled to pyarrow.

A filter picks the rows a fit uses. The text is tokenized and parsed here into
a tree of frozen nodes, and the tree is compiled into a
``pyarrow.compute.Expression``, so a dataset scan can skip whole partitions and
row groups. The text never reaches SQL or ``eval``.

Grammar (keywords are case-insensitive)::

    expr      := or
    or        := and ("OR" and)*
    and       := not ("AND" not)*
    not       := "NOT" not | predicate
    predicate := "(" expr ")"
               | operand [ cmp operand
                         | ["NOT"] "IN" "(" literal ("," literal)* ")"
                         | ["NOT"] "BETWEEN" operand "AND" operand
                         | "IS" ["NOT"] "NULL" ]
    cmp       := "=" | "==" | "!=" | "<>" | "<" | "<=" | ">" | ">="
    operand   := column | literal

Comparisons bind tightest, then NOT, then AND, then OR:
``NOT a = 1 OR b AND c`` reads ``(NOT (a = 1)) OR (b AND c)``.

Columns are bare names ``[A-Za-z_][A-Za-z0-9_.]*`` or double-quoted names,
``"door open"``, in which ``""`` stands for one ``"``. The reserved words
AND, OR, NOT, IN, BETWEEN, IS, NULL, TRUE and FALSE must be quoted to name a
column; DATE and TIMESTAMP are keywords only when a quoted string follows. A
dot is part of the name (nested struct fields are not addressed).

Literals: integers ``42 -7``; floats ``2.5 -0.5 1e3``; strings ``'it''s'``
(``''`` is one quote); ``TRUE`` and ``FALSE``; ``DATE '2026-01-31'``;
``TIMESTAMP '2026-01-31T12:00:00'`` (a space may replace ``T``; seconds, up to
six fractional digits and a trailing ``Z`` are optional). ``NULL`` appears only
in ``IS NULL`` / ``IS NOT NULL``. A boolean column alone is a condition:
``door_open AND NOT defrost``.

Types: a literal must suit its column. Numbers go with integer, floating or
decimal columns, strings with string columns (dictionary-encoded too),
TRUE/FALSE with boolean columns, DATE with date or timestamp columns (as
midnight), and TIMESTAMP with timestamp columns; two columns compare when they
are of the same family. Literals are cast to the column's type where that
loses nothing: integers to the integer type (or int64 when out of its range),
timestamps to the column's unit and zone (microseconds when the unit is
coarser than the literal). Against float columns numbers compare in float64,
against decimal columns as exact decimals, so the bound written is the bound
applied. A timestamp literal is a wall-clock time; against a column with a
time zone it is read as UTC, which a ``Z`` may state; other offsets are not
accepted. Literals no column of that type can hold (a year past 2262 for
nanoseconds, an integer past 64 bits) are errors.

Nulls follow SQL's three-valued logic: a comparison, IN or BETWEEN with a null
value is null, NOT null is null, and a row is kept only when the whole filter
is true. So ``x != 3`` and ``x NOT IN (1, 2)`` both drop rows where ``x`` is
null; write ``OR x IS NULL`` to keep them. In a float column NaN counts as null
(no reading), as it does in the fit: ``x IS NULL`` selects it, comparisons with it
are unknown.

Limits: 10,000 characters, 64 nested levels of parentheses and NOT, and
10,000 values in one IN list. Control characters are refused; tab, newline and
carriage return count as spaces. Every problem is a one-line
:class:`~trendmill.engine.errors.FilterError`; positions count from 1.
"""

from __future__ import annotations

import datetime as _dt
import difflib
import math
import operator
import re
from dataclasses import dataclass
from decimal import Decimal

import pyarrow as pa
import pyarrow.compute as pc

from trendmill.engine.errors import FilterError

__all__ = [
    "Column", "Literal", "Compare", "And", "Or", "Not", "InList", "Between", "IsNull",
    "Node", "parse_filter", "format_filter", "filter_columns", "to_arrow", "compile_filter",
]

MAX_LENGTH = 10_000
MAX_DEPTH = 64
MAX_IN_ITEMS = 10_000

_RESERVED = frozenset({"AND", "OR", "NOT", "IN", "BETWEEN", "IS", "NULL", "TRUE", "FALSE"})
_TYPED = frozenset({"DATE", "TIMESTAMP"})
_OPS = ("==", "!=", "<>", "<=", ">=", "=", "<", ">")   # longest first
_SYNONYMS = {"==": "=", "<>": "!="}
_COMPARE = {"=": operator.eq, "!=": operator.ne, "<": operator.lt, "<=": operator.le,
            ">": operator.gt, ">=": operator.ge}
_NUMBER = re.compile(r"-?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_.]*")
_ID_CHARS = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_.")
_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\ud800-\udfff]")
_DATE = re.compile(r"([0-9]{4})-([0-9]{2})-([0-9]{2})")
_TIME = re.compile(r"[Tt ]([0-9]{2}):([0-9]{2})(?::([0-9]{2})(?:\.([0-9]+))?)?")


# -- the tree ---------------------------------------------------------------

@dataclass(frozen=True, slots=True)
class Column:
    """A reference to a column by name."""
    name: str


@dataclass(frozen=True, slots=True)
class Literal:
    """A constant: bool, int, finite float, str, ``datetime.date`` or ``datetime.datetime``."""
    value: bool | int | float | str | _dt.date

    def __post_init__(self) -> None:
        if not isinstance(self.value, (bool, int, float, str, _dt.date)):
            raise TypeError(f"Literal: unsupported value {self.value!r}")
        if isinstance(self.value, float) and not math.isfinite(self.value):
            raise ValueError(f"Literal: float must be finite, got {self.value!r}")


Operand = Column | Literal


@dataclass(frozen=True, slots=True)
class Compare:
    """``left op right``; ``op`` is one of ``= != < <= > >=``."""
    op: str
    left: Operand
    right: Operand

    def __post_init__(self) -> None:
        if self.op not in _COMPARE:
            raise ValueError(f"Compare: op must be one of {' '.join(_COMPARE)}, got {self.op!r}")


def _check_items(node: And | Or) -> None:
    if not isinstance(node.items, tuple) or len(node.items) < 2:
        raise ValueError(f"{type(node).__name__}: items must be a tuple of at least two nodes")


@dataclass(frozen=True, slots=True)
class And:
    """All of two or more conditions."""
    items: tuple[Node, ...]
    __post_init__ = _check_items


@dataclass(frozen=True, slots=True)
class Or:
    """Any of two or more conditions."""
    items: tuple[Node, ...]
    __post_init__ = _check_items


@dataclass(frozen=True, slots=True)
class Not:
    """The negation of one condition."""
    item: Node


@dataclass(frozen=True, slots=True)
class InList:
    """``operand [NOT] IN (values...)``."""
    operand: Operand
    values: tuple[Literal, ...]
    negated: bool = False


@dataclass(frozen=True, slots=True)
class Between:
    """``operand [NOT] BETWEEN low AND high``, both ends included."""
    operand: Operand
    low: Operand
    high: Operand
    negated: bool = False


@dataclass(frozen=True, slots=True)
class IsNull:
    """``operand IS [NOT] NULL``."""
    operand: Operand
    negated: bool = False


Node = Column | Literal | Compare | And | Or | Not | InList | Between | IsNull


# -- tokenizer --------------------------------------------------------------

@dataclass(frozen=True, slots=True)
class _Token:
    kind: str    # num str ident qident kw op ( ) , end
    value: object
    start: int
    end: int


def _context(text: str, pos: int) -> str:
    # Whitespace of any kind becomes a space so the message stays on one line.
    flat = "".join(" " if ch.isspace() else ch for ch in text)
    if len(flat) <= 80:
        return f' in "{flat}"'
    lo, hi = max(0, pos - 30), min(len(flat), pos + 30)
    return f' near "{"..." if lo else ""}{flat[lo:hi]}{"..." if hi < len(flat) else ""}"'


def _error(text: str, message: str, pos: int | None = None,
           expected: str | None = None) -> FilterError:
    where = "" if pos is None else f" at position {pos + 1}"
    tail = f"; expected {expected}" if expected else ""
    return FilterError(f"{message}{where}{_context(text, pos or 0)}{tail}", expression=text)


def _scan_quoted(text: str, start: int, quote: str) -> tuple[str, int]:
    parts, i = [], start + 1
    while True:
        j = text.find(quote, i)
        if j < 0:
            what = "string" if quote == "'" else "quoted column name"
            raise FilterError(f"unterminated {what} starting at position {start + 1}",
                              expression=text)
        parts.append(text[i:j])
        if text.startswith(quote, j + 1):   # a doubled quote stands for itself
            parts.append(quote)
            i = j + 2
            continue
        return "".join(parts), j + 1


def _number(text: str, start: int, end: int) -> int | float:
    raw = text[start:end]
    if end < len(text) and text[end] in _ID_CHARS:
        raise _error(text, f"malformed number {text[start:end + 1]!r}", start)
    if len(raw) > 400:   # int() of huge digit strings is slow and capped by Python
        raise _error(text, "number is too long", start)
    if not any(c in raw for c in ".eE"):
        return int(raw)
    value = float(raw)
    if not math.isfinite(value):
        raise _error(text, f"number {raw} is out of range", start)
    return value


def _tokenize(text: str) -> list[_Token]:
    bad = _CONTROL.search(text)
    if bad:
        raise FilterError(f"control character U+{ord(bad.group()):04X} at position "
                          f"{bad.start() + 1}", expression=text)
    tokens, i, n = [], 0, len(text)
    while i < n:
        ch = text[i]
        if ch in " \t\n\r":
            i += 1
            continue
        if ch in "(),":
            tokens.append(_Token(ch, ch, i, i + 1))
            i += 1
        elif ch in "'\"":
            value, end = _scan_quoted(text, i, ch)
            if ch == '"' and not value:
                raise _error(text, "empty quoted column name", i)
            tokens.append(_Token("str" if ch == "'" else "qident", value, i, end))
            i = end
        elif m := _NUMBER.match(text, i):
            tokens.append(_Token("num", _number(text, i, m.end()), i, m.end()))
            i = m.end()
        elif m := _IDENT.match(text, i):
            word = m.group()
            kw = word.upper() in _RESERVED
            tokens.append(_Token("kw" if kw else "ident", word.upper() if kw else word, i, m.end()))
            i = m.end()
        else:
            op = next((op for op in _OPS if text.startswith(op, i)), None)
            if op is None:
                raise _error(text, f"unexpected character {ch!r}", i)
            tokens.append(_Token("op", _SYNONYMS.get(op, op), i, i + len(op)))
            i += len(op)
    tokens.append(_Token("end", None, n, n))
    return tokens


# -- parser -----------------------------------------------------------------

class _Parser:
    """Recursive descent over the token list; ``depth`` bounds the recursion."""

    def __init__(self, text: str) -> None:
        self.text = text
        self.tokens = _tokenize(text)
        self.i = 0
        self.depth = 0

    def peek(self, ahead: int = 0) -> _Token:
        return self.tokens[min(self.i + ahead, len(self.tokens) - 1)]

    def take(self) -> _Token:
        tok = self.tokens[self.i]
        self.i += tok.kind != "end"   # never step past the end marker
        return tok

    def is_kw(self, word: str, ahead: int = 0) -> bool:
        tok = self.peek(ahead)
        return tok.kind == "kw" and tok.value == word

    def unexpected(self, tok: _Token, expected: str | None = None) -> FilterError:
        if tok.kind == "end":
            return _error(self.text, "expression ends early", None, expected or "more")
        shown = self.text[tok.start:tok.end]
        shown = shown if len(shown) <= 30 else shown[:27] + "..."
        return _error(self.text, f"unexpected {shown!r}", tok.start, expected)

    def enter(self, tok: _Token) -> None:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise _error(self.text, f"nesting deeper than {MAX_DEPTH} levels", tok.start)

    def parse(self) -> Node:
        if self.peek().kind == "end":
            raise FilterError("filter is empty", expression=self.text)
        node = self.or_()
        if self.peek().kind != "end":
            raise self.unexpected(self.peek())
        return node

    def or_(self) -> Node:
        items = [self.and_()]
        while self.is_kw("OR"):
            self.take()
            items.append(self.and_())
        return items[0] if len(items) == 1 else Or(tuple(items))

    def and_(self) -> Node:
        items = [self.not_()]
        while self.is_kw("AND"):
            self.take()
            items.append(self.not_())
        return items[0] if len(items) == 1 else And(tuple(items))

    def not_(self) -> Node:
        if not self.is_kw("NOT"):
            return self.predicate()
        self.enter(self.take())
        item = self.not_()
        self.depth -= 1
        return Not(item)

    def predicate(self) -> Node:
        tok = self.peek()
        if tok.kind == "(":
            self.enter(self.take())
            node = self.or_()
            if self.peek().kind == "end":
                raise _error(self.text, "'(' is never closed", tok.start)
            if self.peek().kind != ")":
                raise self.unexpected(self.peek(), "')'")
            self.take()
            self.depth -= 1
            return node
        left = self.operand()
        if self.peek().kind == "op":
            op = self.take().value
            return Compare(op, left, self.operand())
        if self.is_kw("IS"):
            self.take()
            negated = self.is_kw("NOT")
            if negated:
                self.take()
            if not self.is_kw("NULL"):
                raise self.unexpected(self.peek(), "NULL")
            self.take()
            return IsNull(left, negated)
        negated = self.is_kw("NOT") and (self.is_kw("IN", 1) or self.is_kw("BETWEEN", 1))
        if negated:
            self.take()
        if self.is_kw("IN"):
            return InList(left, self.in_list(self.take()), negated)
        if self.is_kw("BETWEEN"):
            self.take()
            low = self.operand()
            if not self.is_kw("AND"):
                raise self.unexpected(self.peek(), "AND of BETWEEN")
            self.take()
            return Between(left, low, self.operand(), negated)
        if isinstance(left, Column) or isinstance(left.value, bool):
            return left   # a boolean column (or TRUE/FALSE) is a condition by itself
        raise _error(self.text, f"value {_format_operand(left)} is not a condition; "
                                "compare it with a column", tok.start)

    def in_list(self, in_tok: _Token) -> tuple[Literal, ...]:
        if self.peek().kind != "(":
            raise self.unexpected(self.peek(), "'(' after IN")
        self.take()
        if self.peek().kind == ")":
            raise _error(self.text, "empty IN list", in_tok.start)
        values = []
        while True:
            tok = self.peek()
            value = self.operand()
            if not isinstance(value, Literal):
                raise _error(self.text, "IN list holds values only, not columns", tok.start)
            values.append(value)
            if len(values) > MAX_IN_ITEMS:
                raise _error(self.text, f"IN list longer than {MAX_IN_ITEMS} values", in_tok.start)
            if self.peek().kind == ",":
                self.take()
                continue
            if self.peek().kind == ")":
                self.take()
                return tuple(values)
            raise self.unexpected(self.peek(), "',' or ')'")

    def operand(self) -> Operand:
        tok = self.take()
        if tok.kind in ("num", "str"):
            return Literal(tok.value)
        if tok.kind == "qident":
            return Column(tok.value)
        if tok.kind == "ident":
            word = tok.value.upper()
            if word in _TYPED and self.peek().kind == "str":
                return Literal(self.typed_literal(word, self.take()))
            return Column(tok.value)
        if tok.kind == "kw" and tok.value in ("TRUE", "FALSE"):
            return Literal(tok.value == "TRUE")
        if tok.kind == "kw" and tok.value == "NULL":
            raise _error(self.text, "NULL is allowed only in IS NULL or IS NOT NULL", tok.start)
        raise self.unexpected(tok, "a column or a value")

    def typed_literal(self, word: str, tok: _Token) -> _dt.date:
        raw = tok.value
        date = _DATE.match(raw)
        time = _TIME.match(raw, date.end()) if date else None
        end = time.end() if time else date.end() if date else 0
        zone = raw[end:] in ("Z", "z")
        if not date or (word == "DATE" and end != len(raw)) or (end != len(raw) and not zone):
            form = "'YYYY-MM-DD'" if word == "DATE" else "'YYYY-MM-DDThh:mm:ss[.ffffff][Z]'"
            raise _error(self.text, f"{word} literal {raw!r} is not of the form {form}", tok.start)
        frac = (time.group(4) or "") if time else ""
        if len(frac) > 6:
            raise _error(self.text, f"{word} literal {raw!r} has more than 6 fractional digits",
                         tok.start)
        try:
            day = _dt.date(*(int(g) for g in date.groups()))
            if word == "DATE":
                return day
            hh, mm, ss = (int(g or 0) for g in time.groups()[:3]) if time else (0, 0, 0)
            return _dt.datetime(day.year, day.month, day.day, hh, mm, ss, int(frac.ljust(6, "0")),
                                tzinfo=_dt.timezone.utc if zone else None)
        except ValueError as exc:
            raise _error(self.text, f"{word} literal {raw!r} is not valid ({exc})", tok.start)


def parse_filter(text: str) -> Node:
    """Parse filter text into a tree; raise :class:`FilterError` on any problem."""
    if not isinstance(text, str):
        raise TypeError(f"filter text must be str, got {type(text).__name__}")
    if len(text) > MAX_LENGTH:
        raise FilterError(f"filter is {len(text)} characters long; the limit is {MAX_LENGTH}",
                          expression=text[:200])
    return _Parser(text).parse()


# -- walking and printing ---------------------------------------------------

def _children(node: Node) -> tuple:
    if isinstance(node, (And, Or)):
        return node.items
    if isinstance(node, Not):
        return (node.item,)
    if isinstance(node, Compare):
        return (node.left, node.right)
    if isinstance(node, InList):
        return (node.operand, *node.values)
    if isinstance(node, Between):
        return (node.operand, node.low, node.high)
    if isinstance(node, IsNull):
        return (node.operand,)
    return ()


def filter_columns(node: Node) -> frozenset[str]:
    """The names of all columns the tree refers to."""
    names, stack = set(), [node]
    while stack:   # iterative, so hand-built deep trees cannot overflow the stack
        item = stack.pop()
        if isinstance(item, Column):
            names.add(item.name)
        stack.extend(_children(item))
    return frozenset(names)


def _format_operand(node: Operand) -> str:
    if isinstance(node, Column):
        bare = _IDENT.fullmatch(node.name) and node.name.upper() not in _RESERVED | _TYPED
        return node.name if bare else '"' + node.name.replace('"', '""') + '"'
    value = node.value
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return "'" + value.replace("'", "''") + "'"
    if isinstance(value, _dt.datetime):
        return f"TIMESTAMP '{value.replace(tzinfo=None).isoformat()}{'Z' if value.tzinfo else ''}'"
    return f"DATE '{value.isoformat()}'"


def format_filter(node: Node) -> str:
    """Canonical text of a tree; ``parse_filter(format_filter(t)) == t``."""
    def sub(child: Node, wrap: tuple) -> str:
        text = format_filter(child)
        return f"({text})" if isinstance(child, wrap) else text

    if isinstance(node, Or):
        return " OR ".join(sub(item, (Or,)) for item in node.items)
    if isinstance(node, And):
        return " AND ".join(sub(item, (And, Or)) for item in node.items)
    if isinstance(node, Not):
        return "NOT " + sub(node.item, (And, Or))
    if isinstance(node, Compare):
        return f"{_format_operand(node.left)} {node.op} {_format_operand(node.right)}"
    neg = "NOT " if getattr(node, "negated", False) else ""
    if isinstance(node, InList):
        values = ", ".join(_format_operand(v) for v in node.values)
        return f"{_format_operand(node.operand)} {neg}IN ({values})"
    if isinstance(node, Between):
        return (f"{_format_operand(node.operand)} {neg}BETWEEN {_format_operand(node.low)} "
                f"AND {_format_operand(node.high)}")
    if isinstance(node, IsNull):
        return f"{_format_operand(node.operand)} IS {neg}NULL"
    return _format_operand(node)


# -- compiling to pyarrow ---------------------------------------------------

def _family(value_or_type: object) -> str | None:
    """The comparable family of an Arrow type or a literal value."""
    t = value_or_type
    if isinstance(t, pa.DataType):
        if pa.types.is_dictionary(t):
            t = t.value_type
        if pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t):
            return "number"
        if pa.types.is_string(t) or pa.types.is_large_string(t) or str(t) == "string_view":
            return "string"
        return ("boolean" if pa.types.is_boolean(t) else "date" if pa.types.is_date(t)
                else "timestamp" if pa.types.is_timestamp(t) else None)
    return ("boolean" if isinstance(t, bool) else "number" if isinstance(t, (int, float))
            else "string" if isinstance(t, str) else "timestamp" if isinstance(t, _dt.datetime)
            else "date")


def _describe(lit: Literal) -> str:
    family = _family(lit.value)
    prefix = {"number": "number ", "string": "string ", "boolean": "boolean "}.get(family, "")
    return prefix + _format_operand(lit)


def _value_array(values: list, col: str | None, t: pa.DataType | None) -> pa.Array:
    """Literal values as one Arrow array that compares cleanly with type ``t``."""
    if t is not None and pa.types.is_dictionary(t):
        t = t.value_type
    try:
        candidates = _candidates(values, t)
    except (OverflowError, ValueError):   # float() of an enormous integer
        candidates = []
    for vals, typ in candidates:
        try:
            return pa.array(vals, type=typ)
        except (pa.ArrowException, OverflowError, ValueError, TypeError):
            continue
    shown = ", ".join(_format_operand(Literal(v)) for v in values[:3])
    where = f" for column {col!r} of type {t}" if col else ""
    raise FilterError(f"value {shown} is out of range{where}")


def _candidates(values: list, t: pa.DataType | None) -> list[tuple[list, pa.DataType | None]]:
    """(values, type) pairs to try in turn: the column's own type first."""
    if t is None:
        return [(values, None)]
    if pa.types.is_decimal(t):
        # Decimal literals with their own precision; an int64 scalar would overflow the kernel.
        return [([Decimal(repr(v)) for v in values], None)]
    if pa.types.is_floating(t) or any(isinstance(v, float) for v in values):
        # Compare in float64: casting 0.1 to a float32 column's type would move the bound.
        return [([float(v) for v in values], pa.float64())]
    if pa.types.is_integer(t):
        return [(values, t), (values, pa.int64())]   # int8 column vs 1000: compare as int64
    if pa.types.is_timestamp(t):
        utc = _dt.timezone.utc
        stamps = [v if isinstance(v, _dt.datetime) else _dt.datetime.combine(v, _dt.time())
                  for v in values]
        if t.tz:
            stamps = [s.replace(tzinfo=utc) if s.tzinfo is None else s for s in stamps]
        else:
            stamps = [s.replace(tzinfo=None) for s in stamps]
        # pyarrow truncates silently to the column's unit; keep microseconds when they matter.
        # (Beyond the years 1677-2262 a ns column cannot hold the literal: an error.)
        step = {"s": 1_000_000, "ms": 1_000}.get(t.unit, 1)
        lossless = all(s.microsecond % step == 0 for s in stamps)
        return [(stamps, t if lossless else pa.timestamp("us", tz=t.tz))]
    return [(values, t)]


def _operand_expr(node: Operand) -> pc.Expression:
    if isinstance(node, Column):
        return pc.field(node.name)
    return pc.scalar(_value_array([node.value], None, None)[0])


class _Compiler:
    def __init__(self, schema: pa.Schema) -> None:
        self.schema = schema

    def type_of(self, name: str) -> pa.DataType:
        found = self.schema.get_all_field_indices(name)
        if len(found) == 1:
            return self.schema.field(found[0]).type
        if found:
            raise FilterError(f"column {name!r} is ambiguous: the schema has it {len(found)} times")
        names = self.schema.names
        more = f", ... ({len(names) - 20} more)" if len(names) > 20 else ""
        have = ", ".join(names[:20]) + more
        close = difflib.get_close_matches(name, names, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise FilterError(f"column {name!r} not in schema (have: {have or 'no columns'}){hint}")

    def ref(self, name: str) -> pc.Expression:
        """A column as an expression; in a float column NaN reads as null.

        NaN is "no reading" here, as in the fit, which skips it like a null. It also
        keeps answers independent of row-group pruning: Parquet statistics leave NaN
        out, so ``NOT (x < 0)`` pruned on them would disagree with the same filter
        evaluated row by row if NaN were an ordinary value.
        """
        t = self.type_of(name)
        if pa.types.is_floating(t):
            x = pc.field(name)
            return pc.if_else(pc.Expression._call("is_nan", [x]), pc.scalar(pa.scalar(None, t)), x)
        return pc.field(name)

    def check(self, col: Column, lit: Literal) -> None:
        t = self.type_of(col.name)
        fam, lit_fam = _family(t), _family(lit.value)
        if fam != lit_fam and not (fam == "timestamp" and lit_fam == "date"):
            raise FilterError(f"cannot compare column {col.name!r} of type {t} "
                              f"with {_describe(lit)}")

    def pair(self, a: Operand, b: Operand) -> tuple[pc.Expression, pc.Expression]:
        """Both operands as expressions, after checking that they are comparable."""
        if isinstance(a, Column) and isinstance(b, Column):
            ta, tb = self.type_of(a.name), self.type_of(b.name)
            if _family(ta) is None or _family(ta) != _family(tb):
                raise FilterError(f"cannot compare column {a.name!r} of type {ta} "
                                  f"with column {b.name!r} of type {tb}")
            return self.ref(a.name), self.ref(b.name)
        if isinstance(b, Column):
            eb, ea = self.pair(b, a)
            return ea, eb
        if isinstance(a, Column):
            self.check(a, b)
            t = self.type_of(a.name)
            return self.ref(a.name), pc.scalar(_value_array([b.value], a.name, t)[0])
        if _family(a.value) != _family(b.value):
            raise FilterError(f"cannot compare {_describe(a)} with {_describe(b)}")
        return _operand_expr(a), _operand_expr(b)

    def build(self, node: Node) -> pc.Expression:
        if isinstance(node, Column):
            t = self.type_of(node.name)
            if _family(t) != "boolean":
                raise FilterError(f"column {node.name!r} of type {t} is not a condition; "
                                  "compare it with a value")
            return pc.field(node.name)
        if isinstance(node, Literal):
            if not isinstance(node.value, bool):
                raise FilterError(f"{_describe(node)} is not a condition")
            return pc.scalar(node.value)
        if isinstance(node, Compare):
            return _COMPARE[node.op](*self.pair(node.left, node.right))
        if isinstance(node, (And, Or)):
            parts = [self.build(item) for item in node.items]
            join = (lambda x, y: x & y) if isinstance(node, And) else (lambda x, y: x | y)
            while len(parts) > 1:   # balanced, so long chains stay shallow for Arrow
                parts = [join(*parts[k:k + 2]) if k + 1 < len(parts) else parts[k]
                         for k in range(0, len(parts), 2)]
            return parts[0]
        if isinstance(node, Not):
            return ~self.build(node.item)
        if isinstance(node, Between):
            x, low = self.pair(node.operand, node.low)
            x, high = self.pair(node.operand, node.high)
            inside = (low <= x) & (x <= high)
            return ~inside if node.negated else inside
        if isinstance(node, IsNull):
            x = (self.ref(node.operand.name) if isinstance(node.operand, Column)
                 else _operand_expr(node.operand))
            return x.is_valid() if node.negated else x.is_null()
        if isinstance(node, InList):
            return self.in_list(node)
        raise TypeError(f"not a filter node: {node!r}")

    def in_list(self, node: InList) -> pc.Expression:
        values = [v.value for v in node.values]
        if isinstance(node.operand, Column):
            for lit in node.values:
                self.check(node.operand, lit)
            name = node.operand.name
            x = self.ref(name)
            found = x.isin(_value_array(values, name, self.type_of(name)))
            # is_in says false for a null input; keep SQL's null so that NOT IN drops it too.
            found = pc.if_else(x.is_valid(), found, pc.scalar(pa.scalar(None, pa.bool_())))
        else:
            for lit in node.values:
                self.pair(node.operand, lit)
            found = _operand_expr(node.operand).isin(_value_array(values, None, None))
        return ~found if node.negated else found


def to_arrow(node: Node, schema: pa.Schema) -> pc.Expression:
    """Compile a tree into a dataset expression, checking names and types against ``schema``."""
    if not isinstance(schema, pa.Schema):
        raise TypeError(f"schema must be a pyarrow.Schema, got {type(schema).__name__}")
    try:
        compiler = _Compiler(schema)
        names = sorted(filter_columns(node))
        for name in names:
            compiler.type_of(name)
        expr = compiler.build(node)
        # Binding against an empty table surfaces any type pyarrow cannot compare now,
        # not halfway through a scan.
        try:
            pa.schema([schema.field(n) for n in names]).empty_table().filter(expr)
        except pa.ArrowException as exc:
            raise FilterError("not supported for these column types: "
                              f"{str(exc).splitlines()[0]}") from None
    except FilterError as exc:
        exc.details.setdefault("expression", format_filter(node))
        raise
    return expr


def compile_filter(text: str | None, schema: pa.Schema) -> pc.Expression | None:
    """Parse and compile ``text``; ``None`` when it is empty or only spaces."""
    if text is None or not text.strip(" \t\n\r"):
        return None
    node = parse_filter(text)
    try:
        return to_arrow(node, schema)
    except FilterError as exc:
        exc.details["expression"] = text
        raise
