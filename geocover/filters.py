"""A small, safe attribute-filter language for constraint layers.

An exclusion layer can be narrowed to some of its features with a filter
such as ``zone_class in ("A", "AE") and depth_m >= 0.5``.  The text is read
by a hand-written tokenizer and recursive-descent parser into a tiny tree
that is evaluated column-wise on a DataFrame; nothing is ever passed to
``eval`` and only the operators below exist.

Grammar::

    expr       := or_expr
    or_expr    := and_expr ("or" and_expr)*
    and_expr   := not_expr ("and" not_expr)*
    not_expr   := "not" not_expr | primary
    primary    := "(" expr ")" | comparison
    comparison := field OP value
                | field ["not"] "in" "(" value ("," value)* [","] ")"
                | field "is" ["not"] "null"
    OP         := "==" | "=" | "!=" | "<>" | "<" | "<=" | ">" | ">="
    field      := identifier | `back-quoted name`
    value      := number | 'string' | "string" | true | false

Keywords are case-insensitive; field names are not.  Inside a quoted text a
backslash escapes the next character (``'it\\'s'``, ``'C:\\\\data'``); SQL's
doubled quote (``'it''s'``) is refused with a hint.  A missing value (null / NaN) matches no
comparison (``==``, ``!=``, ``<``, ``in``, ``not in`` are all false on it);
only ``is null`` finds it.  ``not`` simply negates, so ``not depth_m > 1``
is true on a missing depth while ``depth_m <= 1`` is not.

>>> import pandas as pd
>>> frame = pd.DataFrame({"zone_class": ["A", "X", "AE"], "depth_m": [0.2, 1.0, 0.8]})
>>> filter_mask(frame, 'zone_class in ("A", "AE") and depth_m >= 0.5').tolist()
[False, False, True]
>>> parse_filter("depth_m >= 0.5 or not zone_class == 'X'").fields
('depth_m', 'zone_class')
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Union

import numpy as np

from .errors import ParameterError

__all__ = ["Filter", "parse_filter", "filter_mask"]

# --------------------------------------------------------------------------- tokens

_MAX_DEPTH = 100  # nesting of 'not' and '(' (each level is a few Python frames)

_KEYWORDS = {"and", "or", "not", "in", "is", "null", "true", "false"}
_OPS = ("==", "!=", "<>", "<=", ">=", "=", "<", ">")

_TOKEN = re.compile(
    r"""
    (?P<ws>\s+)
  | (?P<number>[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)
  | (?P<string>'(?:[^'\\]|\\.)*'|"(?:[^"\\]|\\.)*")
  | (?P<quoted>`[^`]+`)
  | (?P<name>[A-Za-z_][A-Za-z0-9_]*)
  | (?P<op>==|!=|<>|<=|>=|=|<|>)
  | (?P<punct>[(),])
    """,
    re.VERBOSE,
)


@dataclass(frozen=True)
class _Token:
    kind: str  # number, string, field, keyword, op, punct, end
    value: Any
    pos: int


def _error(text: str, pos: int, message: str, param: str | None) -> ParameterError:
    pointer = f"\n    {text}\n    {' ' * pos}^"
    return ParameterError(f"filter {text!r}: {message} at position {pos}{pointer}", param)


def _unescape(body: str) -> str:
    return re.sub(r"\\(.)", r"\1", body)


def _tokenize(text: str, param: str | None) -> list[_Token]:
    tokens: list[_Token] = []
    pos = 0
    while pos < len(text):
        match = _TOKEN.match(text, pos)
        if match is None:
            raise _error(text, pos, f"unexpected character {text[pos]!r}", param)
        kind = match.lastgroup
        raw = match.group()
        if kind == "number":
            # "a-1" is not valid anyway; a sign only belongs to a number after an operator or "(" / ","
            value: Any = float(raw)
            if value.is_integer() and re.fullmatch(r"[-+]?\d+", raw):
                value = int(raw)
            tokens.append(_Token("number", value, pos))
        elif kind == "string":
            tokens.append(_Token("string", _unescape(raw[1:-1]), pos))
        elif kind == "quoted":
            tokens.append(_Token("field", raw[1:-1], pos))
        elif kind == "name":
            low = raw.lower()
            tokens.append(_Token("keyword", low, pos) if low in _KEYWORDS else _Token("field", raw, pos))
        elif kind == "op":
            tokens.append(_Token("op", {"=": "==", "<>": "!="}.get(raw, raw), pos))
        elif kind == "punct":
            tokens.append(_Token("punct", raw, pos))
        pos = match.end()
    tokens.append(_Token("end", None, len(text)))
    return tokens


# --------------------------------------------------------------------------- tree


@dataclass(frozen=True)
class _Compare:
    field: str
    op: str  # ==, !=, <, <=, >, >=, in, not in, is null, is not null
    values: tuple[Any, ...]
    pos: int


@dataclass(frozen=True)
class _Bool:
    op: str  # and, or
    left: "_Node"
    right: "_Node"


@dataclass(frozen=True)
class _Not:
    operand: "_Node"


_Node = Union[_Compare, _Bool, _Not]


class _Parser:
    def __init__(self, text: str, param: str | None) -> None:
        self.text = text
        self.param = param
        self.tokens = _tokenize(text, param)
        self.i = 0
        self.depth = 0

    def peek(self) -> _Token:
        return self.tokens[self.i]

    def take(self) -> _Token:
        tok = self.tokens[self.i]
        self.i += 1
        return tok

    def fail(self, tok: _Token, expected: str) -> ParameterError:
        found = "the end of the text" if tok.kind == "end" else repr(str(tok.value))
        return _error(self.text, tok.pos, f"expected {expected}, found {found}", self.param)

    def is_keyword(self, word: str) -> bool:
        tok = self.peek()
        return tok.kind == "keyword" and tok.value == word

    def parse(self) -> _Node:
        if self.peek().kind == "end":
            raise _error(self.text, 0, "the filter is empty", self.param)
        node = self.or_expr()
        tok = self.peek()
        if tok.kind != "end":
            before = self.tokens[self.i - 1]
            if tok.kind == "string" and before.kind == "string":  # 'it''s': SQL's doubled quote
                raise _error(
                    self.text, tok.pos,
                    "two quoted texts in a row; to put a quote inside a text write it as \\' or \\\" "
                    "(or quote with the other kind: \"it's\")",
                    self.param,
                )
            raise self.fail(tok, "'and', 'or' or the end of the filter")
        return node

    def or_expr(self) -> _Node:
        node = self.and_expr()
        while self.is_keyword("or"):
            self.take()
            node = _Bool("or", node, self.and_expr())
        return node

    def and_expr(self) -> _Node:
        node = self.not_expr()
        while self.is_keyword("and"):
            self.take()
            node = _Bool("and", node, self.not_expr())
        return node

    def not_expr(self) -> _Node:
        if self.is_keyword("not"):
            tok = self.take()
            self.nest(tok)
            node = _Not(self.not_expr())
            self.depth -= 1
            return node
        return self.primary()

    def nest(self, tok: _Token) -> None:
        """Count one level of 'not' or '('; a text nested past any sensible depth is refused, not a RecursionError."""
        self.depth += 1
        if self.depth > _MAX_DEPTH:
            raise _error(self.text, tok.pos, f"the filter nests 'not' and '(' more than {_MAX_DEPTH} deep", self.param)

    def primary(self) -> _Node:
        tok = self.peek()
        if tok.kind == "punct" and tok.value == "(":
            self.nest(self.take())
            node = self.or_expr()
            close = self.take()
            if not (close.kind == "punct" and close.value == ")"):
                raise self.fail(close, "')'")
            self.depth -= 1
            return node
        return self.comparison()

    def value(self) -> Any:
        tok = self.take()
        if tok.kind in ("number", "string"):
            return tok.value
        if tok.kind == "keyword" and tok.value in ("true", "false"):
            return tok.value == "true"
        if tok.kind == "field":
            raise _error(
                self.text, tok.pos,
                f"expected a value, found the name {tok.value!r}; put text values in quotes ('{tok.value}')",
                self.param,
            )
        raise self.fail(tok, "a value (a number, a quoted text, true or false)")

    def comparison(self) -> _Node:
        tok = self.take()
        if tok.kind != "field":
            raise self.fail(tok, "a field name")
        field, pos = str(tok.value), tok.pos
        nxt = self.take()
        if nxt.kind == "op":
            return _Compare(field, nxt.value, (self.value(),), pos)
        if nxt.kind == "keyword" and nxt.value == "is":
            negate = self.is_keyword("not")
            if negate:
                self.take()
            null = self.take()
            if not (null.kind == "keyword" and null.value == "null"):
                raise self.fail(null, "'null'")
            return _Compare(field, "is not null" if negate else "is null", (), pos)
        negate = False
        if nxt.kind == "keyword" and nxt.value == "not":
            negate = True
            nxt = self.take()
        if nxt.kind == "keyword" and nxt.value == "in":
            opening = self.take()
            if not (opening.kind == "punct" and opening.value == "("):
                raise self.fail(opening, "'(' after 'in'")
            values = [self.value()]
            while True:
                sep = self.take()
                if sep.kind == "punct" and sep.value == ")":
                    break
                if not (sep.kind == "punct" and sep.value == ","):
                    raise self.fail(sep, "',' or ')'")
                if self.peek().kind == "punct" and self.peek().value == ")":
                    self.take()
                    break
                values.append(self.value())
            return _Compare(field, "not in" if negate else "in", tuple(values), pos)
        raise self.fail(nxt, "a comparison (==, !=, <, <=, >, >=, in, not in, is null)")


def _comparisons(node: _Node) -> list[_Compare]:
    if isinstance(node, _Compare):
        return [node]
    if isinstance(node, _Bool):
        return _comparisons(node.left) + _comparisons(node.right)
    return _comparisons(node.operand)


# --------------------------------------------------------------------------- evaluation


@dataclass(frozen=True)
class Filter:
    """A parsed attribute filter; call :meth:`mask` on a DataFrame.

    Use :func:`parse_filter` to make one.
    """

    text: str
    tree: Any
    param: str | None = None

    @property
    def fields(self) -> tuple[str, ...]:
        """The field names the filter reads, in order of first use."""
        return tuple(dict.fromkeys(node.field for node in _comparisons(self.tree)))

    def mask(self, frame: Any, layer: str = "layer") -> np.ndarray:
        """Boolean array: which rows of ``frame`` the filter selects.

        Parameters
        ----------
        frame : pandas.DataFrame
            The layer's attribute table (a GeoDataFrame is fine).
        layer : str
            The layer's name, used in error messages.

        Raises
        ------
        ParameterError
            When a field is not in the layer (the message lists the layer's
            fields) or a value's type does not fit the field's.
        """
        columns = [str(c) for c in frame.columns if str(c) != getattr(frame, "_geometry_column_name", "geometry")]
        for node in _comparisons(self.tree):
            name = node.field
            if name not in frame.columns:
                alike = [c for c in columns if c.lower() == name.lower()]
                hint = f" (field names are case-sensitive: did you mean {alike[0]!r}?)" if alike else ""
                raise _error(
                    self.text, node.pos,
                    f"layer {layer} has no field {name!r}{hint}; its fields are: {', '.join(columns) or 'none'}",
                    self.param,
                )
        return np.asarray(self._eval(self.tree, frame, layer), dtype=bool)

    def _eval(self, node: _Node, frame: Any, layer: str) -> np.ndarray:
        if isinstance(node, _Bool):
            left = self._eval(node.left, frame, layer)
            right = self._eval(node.right, frame, layer)
            return (left & right) if node.op == "and" else (left | right)
        if isinstance(node, _Not):
            return ~self._eval(node.operand, frame, layer)
        return self._compare(node, frame, layer)

    def _compare(self, node: _Compare, frame: Any, layer: str) -> np.ndarray:
        import pandas as pd

        column = frame[node.field]
        missing = np.asarray(pd.isna(column), dtype=bool)
        if node.op == "is null":
            return missing
        if node.op == "is not null":
            return ~missing
        self._check_types(node, column, layer)
        if node.op in ("in", "not in"):
            inside = np.asarray(column.isin(list(node.values)), dtype=bool)
            result = inside if node.op == "in" else ~inside
        else:
            value = node.values[0]
            data = column.to_numpy()
            present = ~missing
            result = np.zeros(len(column), dtype=bool)
            sub = data[present]
            try:
                if node.op == "==":
                    got = sub == value
                elif node.op == "!=":
                    got = sub != value
                elif node.op == "<":
                    got = sub < value
                elif node.op == "<=":
                    got = sub <= value
                elif node.op == ">":
                    got = sub > value
                else:
                    got = sub >= value
                result[present] = np.asarray(got, dtype=bool)
            except (TypeError, ValueError):
                raise _error(
                    self.text, node.pos,
                    f"field {node.field!r} of layer {layer} ({column.dtype}) cannot be compared with {value!r}",
                    self.param,
                ) from None
        return result & ~missing

    def _check_types(self, node: _Compare, column: Any, layer: str) -> None:
        import pandas as pd

        dtype = column.dtype
        numeric = pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)
        boolean = pd.api.types.is_bool_dtype(dtype)
        present = column.dropna()
        textual = not numeric and not boolean and (len(present) == 0 or present.map(lambda v: isinstance(v, str)).all())
        for value in node.values:
            is_text = isinstance(value, str)
            is_bool = isinstance(value, bool)
            if numeric and (is_text or is_bool):
                kind = "text" if is_text else "true/false"
                raise _error(
                    self.text, node.pos,
                    f"field {node.field!r} of layer {layer} holds numbers ({dtype}) but is compared with the "
                    f"{kind} value {value!r}; write the value as a number",
                    self.param,
                )
            if textual and not is_text and len(present):
                raise _error(
                    self.text, node.pos,
                    f"field {node.field!r} of layer {layer} holds text but is compared with {value!r}; "
                    f"put the value in quotes ('{value}')",
                    self.param,
                )
            if boolean and not is_bool and not (isinstance(value, (int, float)) and value in (0, 1)):
                raise _error(
                    self.text, node.pos,
                    f"field {node.field!r} of layer {layer} holds true/false values but is compared with {value!r}",
                    self.param,
                )


def parse_filter(text: str, param: str | None = None) -> Filter:
    """Parse a filter expression; syntax errors point at the position.

    Parameters
    ----------
    text : str
        E.g. ``zone_class in ("A", "AE") and depth_m >= 0.5``.
    param : str, optional
        The parameter name the text came from, for error messages.

    >>> parse_filter("depth_m >> 1")
    Traceback (most recent call last):
    ...
    geocover.errors.ParameterError: filter 'depth_m >> 1': expected a value (a number, a quoted text, true or false), found '>' at position 9
        depth_m >> 1
                 ^
    """
    if not isinstance(text, str):
        raise ParameterError(f"filter: expected a text such as \"zone_class in ('A', 'AE')\", got {text!r}", param)
    return Filter(text, _Parser(text, param).parse(), param)


def filter_mask(frame: Any, text: str, layer: str = "layer", param: str | None = None) -> np.ndarray:
    """Boolean array of the rows of ``frame`` that the filter ``text`` selects.

    See the module docstring for the grammar.
    """
    return parse_filter(text, param).mask(frame, layer)
