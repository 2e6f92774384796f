"""Reading a TOML file, and one line for people from a pydantic validation error.

A message names the key as TOML would write it (``units[0].temperature_tag``),
says what was expected and what was found, and how many more problems the file
has. An unknown key is reported as unknown (before any key it makes missing),
with the nearest known key suggested.
"""

from __future__ import annotations

import difflib
import re
import tomllib
import types
import typing
from pathlib import Path

from pydantic import ValidationError
from pydantic_core import InitErrorDetails, PydanticCustomError

from ..errors import ConfigError

_UNKNOWN = ("extra_forbidden", "unexpected_keyword_argument")
_TABLE = ("model_type", "model_attributes_type", "dataclass_type", "dict_type")
_LIST = ("tuple_type", "list_type")
_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
_TOML_WHERE = re.compile(r"^(.*) \(at line (\d+), column (\d+)\)$")
_MAX_SHOWN = 60


def read_toml(
    path: Path, error: type[ConfigError], what: str, hint: str = ""
) -> tuple[bytes, dict]:
    """The bytes and the parsed tables of a TOML file; problems raise ``error`` naming the file."""
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise error(f"{what} not found{hint}", path=path) from None
    except OSError as exc:
        raise error(f"cannot read {what}: {exc.strerror}", path=path) from None
    try:
        return raw, tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise error(f"not valid TOML: not UTF-8 text at byte {exc.start}", path=path) from None
    except tomllib.TOMLDecodeError as exc:
        m = _TOML_WHERE.match(str(exc))
        where = f" at line {m.group(2)}, column {m.group(3)}" if m else ""
        raise error(f"not valid TOML{where}: {m.group(1) if m else exc}", path=path) from None


def dotted(loc: tuple) -> str:
    """A pydantic location as a TOML key: ``("units", 0, "name")`` -> ``units[0].name``."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
            continue
        text = str(part)
        if not _BARE_KEY.fullmatch(text):
            text = '"' + _escape(text.replace("\\", "\\\\").replace('"', '\\"')) + '"'
        out += f".{text}" if out else text
    return out


def _escape(text: str) -> str:
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode() for c in text)


def shown(value: object) -> str:
    """A value as shown in a message: its repr, on one line, shortened."""
    text = _escape(repr(value))
    return text if len(text) <= _MAX_SHOWN else text[: _MAX_SHOWN - 1] + "…"


def located(loc: tuple, message: str, value: object = None) -> ValidationError:
    """A validation error at ``loc`` below the field being validated (checks across keys)."""
    problem = PydanticCustomError("config", "{message}", {"message": message})
    return ValidationError.from_exception_data(
        "convmon", [InitErrorDetails(type=problem, loc=loc, input=value)]
    )


def raise_first_problem(
    exc: ValidationError,
    model: type,
    error: type[ConfigError],
    path: Path | None,
    prefix: str = "",
) -> typing.NoReturn:
    """Raise ``error`` for the first problem in ``exc`` (unknown keys first), counting the rest."""
    problems = sorted(exc.errors(include_url=False), key=lambda e: e["type"] not in _UNKNOWN)
    first = problems[0]
    message = prefix + _describe(first, model)
    if len(problems) > 1:
        more = len(problems) - 1
        message += f" ({more} more problem{'s' if more > 1 else ''} in this file)"
    raise error(message, path=path, key=dotted(first["loc"]) or None) from None


def _describe(err: dict, model: type) -> str:
    kind, value = err["type"], err.get("input")
    if kind in _UNKNOWN:
        return _unknown(err["loc"], model)
    if kind == "missing":
        table = getattr(_inner(_type_at(model, err["loc"])), "__pydantic_fields__", None)
        return "missing required table" if table else "missing required key"
    if kind == "value_error":
        return str(err["ctx"]["error"])
    if kind == "config":
        return err["msg"]
    if kind in _TABLE:
        return f"expected a table, got {shown(value)}"
    if kind in _LIST:
        return f"expected a list, got {shown(value)}"
    text = err["msg"].removeprefix("Input should be ")
    return f"expected {text[:1].lower()}{text[1:]}, got {shown(value)}"


def _unknown(loc: tuple, model: type) -> str:
    fields = getattr(_inner(_type_at(model, loc[:-1])), "__pydantic_fields__", None) or {}
    known = [_key_of(n, f) for n, f in fields.items()]
    if not known:
        return "unknown key"
    near = difflib.get_close_matches(str(loc[-1]), known, n=1, cutoff=0.6)
    if near:
        return f"unknown key; did you mean {near[0]!r}?"
    return f"unknown key; expected one of: {', '.join(sorted(known))}"


def _key_of(name: str, field) -> str:
    alias = field.validation_alias
    return alias if isinstance(alias, str) else (field.alias or name)


def _inner(tp):
    """Strip Annotated and ``X | None`` until a model, a container or a plain type is left."""
    while True:
        origin = typing.get_origin(tp)
        if origin is typing.Annotated:
            tp = typing.get_args(tp)[0]
        elif origin in (typing.Union, types.UnionType):
            rest = [a for a in typing.get_args(tp) if a is not type(None)]
            if len(rest) != 1:
                return tp
            tp = rest[0]
        else:
            return tp


def _type_at(model: type, loc: tuple) -> object:
    """The declared type of the value at ``loc`` of ``model`` (None when unknown)."""
    tp = model
    for part in loc:
        tp = _inner(tp)
        fields = getattr(tp, "__pydantic_fields__", None)
        origin = typing.get_origin(tp)
        if fields is not None and isinstance(part, str):
            found = [f for n, f in fields.items() if _key_of(n, f) == part]
            if not found:
                return None
            tp = found[0].annotation
        elif origin in (tuple, list) and isinstance(part, int):
            tp = typing.get_args(tp)[0]
        elif origin is dict:
            tp = typing.get_args(tp)[1]
        else:
            return None
    return tp
