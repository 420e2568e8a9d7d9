"""Reading TOML files and turning pydantic validation errors into wirestate errors."""

from __future__ import annotations

import difflib
import json
import math
import tomllib
import types
import typing
from pathlib import Path
from typing import Annotated, Any, TypeVar

from pydantic import BaseModel, BeforeValidator, Field, ValidationError

from wirestate.errors import ModelFileError, WirestateError

Model = TypeVar("Model", bound=BaseModel)

#: what a quantity field accepts, for the JSON Schema: a number in SI base units or a string
#: such as "100uH", "4.7 kohm", "4k7", "10%" (the field's validator reads the unit)
QuantityInput = (
    float
    | Annotated[
        str, Field(pattern=r"^\s*[-+]?(\d|\.\d|[A-Za-zµμ]\d)", examples=["100uH", "4k7", "48V"])
    ]
)


def _true_or_false(value: Any) -> Any:
    # pydantic's lax bool reads "yes", "off", 1 and 0.0 as booleans; a TOML boolean is
    # written true or false, and anything else is more likely a mistake than a switch
    if isinstance(value, bool):
        return value
    raise ValueError(f"expected true or false, got {value!r}")


#: a boolean field of a file: only TOML's true or false (no "yes", no 1)
Flag = Annotated[bool, BeforeValidator(_true_or_false)]

_CODES = {
    "missing": "missing_field",
    "extra_forbidden": "unknown_field",
    "union_tag_invalid": "unknown_kind",
    "union_tag_not_found": "missing_field",
    "greater_than": "out_of_range",
    "greater_than_equal": "out_of_range",
    "less_than": "out_of_range",
    "less_than_equal": "out_of_range",
    "literal_error": "invalid_field",
}


def read_toml(path: str | Path) -> dict[str, Any]:
    """Read a TOML file; ``file_not_found`` / ``malformed_toml`` on failure."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ModelFileError("file_not_found", "no such file", file=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelFileError("file_not_found", f"cannot read: {exc}", file=str(path)) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ModelFileError("malformed_toml", f"not valid TOML: {exc}", file=str(path)) from None
    except RecursionError:
        # the standard library's TOML reader recurses once per nesting level
        raise ModelFileError(
            "nesting_too_deep",
            "arrays or inline tables are nested too deeply to read (no wirestate file "
            f"needs more than {MAX_DEPTH} levels)",
            file=str(path),
        ) from None


#: deepest nesting of tables and arrays a wirestate file may have (none needs more than 5)
MAX_DEPTH = 64


def check_plain_data(data: Any, *, file: str | None = None) -> None:
    """Refuse NaN or infinite numbers anywhere in parsed file data, and nesting deeper
    than :data:`MAX_DEPTH`, naming the location. Iterative, so any depth is safe."""
    stack: list[tuple[Any, tuple[str | int, ...]]] = [(data, ())]
    while stack:
        value, where = stack.pop()
        if len(where) > MAX_DEPTH:
            raise ModelFileError(
                "nesting_too_deep",
                f"nested more than {MAX_DEPTH} levels deep",
                file=file,
                location=where[:MAX_DEPTH],
            )
        if isinstance(value, float) and not math.isfinite(value):
            raise ModelFileError(
                "non_finite_value",
                f"{value!r} is not a finite number; give a finite value",
                file=file,
                location=where,
            )
        if isinstance(value, dict):
            stack.extend((v, (*where, str(k))) for k, v in value.items())
        elif isinstance(value, list | tuple):
            stack.extend((v, (*where, i)) for i, v in enumerate(value))


#: top-level table of each file kind -> how messages name the kind
FILE_KINDS = {"circuit": "circuit", "system": "system", "tuning": "tuning",
              "state_space": "state-space"}  # fmt: skip


def expect_file_kind(data: Any, kind: str, *, file: str | None = None) -> None:
    """Refuse parsed file data of another kind (its table present, ``kind``'s absent) as
    such (``wrong_file_kind``), rather than by its first unknown field."""
    if not isinstance(data, dict) or isinstance(data.get(kind), dict):
        return
    for table, name in FILE_KINDS.items():
        if table != kind and isinstance(data.get(table), dict):
            raise ModelFileError(
                "wrong_file_kind",
                f"this is a {name} file, and a {FILE_KINDS[kind]} file was expected here (a "
                f"[{kind}] table)",
                file=file,
                location=(table,),
            )


def validate(model: type[Model], data: Any, *, file: str | None = None) -> Model:
    """Validate ``data`` against ``model``; the first problem becomes a :class:`WirestateError`."""
    check_plain_data(data, file=file)
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        raise error_from_validation(exc, file=file, model=model) from None
    except WirestateError as exc:
        # whole-model checks (couplings) raise our error directly, with its location
        raise exc.with_file(file) if file else exc from None


def error_from_validation(
    exc: ValidationError, *, file: str | None = None, model: type[BaseModel] | None = None
) -> WirestateError:
    """Convert the first entry of a pydantic ``ValidationError`` to a wirestate error.

    An unknown key is reported before a missing one (a mistyped key causes both), with the
    closest accepted key (``difflib``) as a suggestion; ``model`` gives the accepted keys.
    """
    details = exc.errors(include_url=False)
    extra = [d for d in details if d["type"] == "extra_forbidden"]
    if extra:
        return _unknown_key(extra[0], details, file=file, model=model)
    first = _most_specific(details)
    location = tuple(_clean_location(first["loc"]))
    original = (first.get("ctx") or {}).get("error")
    if isinstance(original, WirestateError):
        return type(original)(original.code, original.message, file=file, location=location)
    code = _CODES.get(first["type"], "invalid_field")
    message = first["msg"]
    if first["type"] == "value_error":
        message = message.removeprefix("Value error, ")
        if "must start with a letter" in message:
            code = "invalid_name"
    elif first["type"] == "union_tag_invalid":
        ctx = first.get("ctx", {})
        message = f"unknown kind {ctx.get('tag')!r}; expected one of {ctx.get('expected_tags', '')}"
    elif first["type"] == "union_tag_not_found":
        message = "missing field 'kind'"
        location = location + ("kind",)
    elif first["type"] in ("tuple_type", "list_type"):
        message = f'expected a list such as ["a", "b"], got {first.get("input")!r}'
    elif first["type"] == "too_long":
        message = f"too many items: got {first.get('input')!r}"
    elif first["type"] == "float_type":
        # strict numbers (state-space matrices): say what was given instead
        message = f"expected a number (SI base units), got {first.get('input')!r}"
    elif first["type"] == "missing" and location and isinstance(location[-1], int):
        # an item of a fixed-length list (a [low, high] pair), not a key
        message = f"too few items: got {first.get('input')!r}"
        location = location[:-1]
    elif first["type"] == "missing":
        message = f"missing required field {location[-1]!r}" if location else "missing field"
    elif first["type"] == "extra_forbidden":
        message = f"unknown field {location[-1]!r}" if location else "unknown field"
    return ModelFileError(code, message, file=file, location=location)


def _unknown_key(
    entry: dict[str, Any],
    details: list[dict[str, Any]],
    *,
    file: str | None,
    model: type[BaseModel] | None,
) -> WirestateError:
    location = tuple(_clean_location(entry["loc"]))
    key = str(entry["loc"][-1])
    parent = entry["loc"][:-1]
    # the keys that were expected here: missing siblings first, then every field
    missing = [str(d["loc"][-1]) for d in details if d["type"] == "missing"]
    missing = [m for m, d in zip(missing, details, strict=False) if d["loc"][:-1] == parent]
    known = [m for m in missing if m != key] + [
        f for f in (accepted_keys(model, parent) if model else []) if f not in missing
    ]
    close = difflib.get_close_matches(key, missing, n=1, cutoff=0.6) or difflib.get_close_matches(
        key, known, n=1, cutoff=0.6
    )
    message = f"unknown field {key!r}"
    if close:
        message += f"; did you mean {close[0]!r}?"
    elif known:
        message += f" (fields here: {', '.join(known)})"
    return ModelFileError("unknown_field", message, file=file, location=location)


def accepted_keys(model: type[BaseModel], loc: tuple[Any, ...]) -> list[str]:
    """The field names (TOML keys) a model accepts at the location ``loc`` of a file.

    Follows pydantic locations through nested models, ``dict``/``list`` members and tagged
    unions (whose tag pydantic puts into the location); best effort, ``[]`` if lost.
    """
    current: Any = model
    steps = list(loc)
    while steps:
        current = _strip(current)
        step = steps.pop(0)
        if isinstance(current, type) and issubclass(current, BaseModel):
            field = _field_by_key(current, step)
            if field is None:
                return []
            current = field.annotation
            continue
        origin, args = typing.get_origin(current), typing.get_args(current)
        if origin in (dict, list, tuple) and args:
            current = args[-1] if origin is dict else args[0]
            continue
        if origin in (typing.Union, types.UnionType):
            current = _union_member(args, step)
            if current is None:
                return []
            continue
        return []
    current = _strip(current)
    if isinstance(current, type) and issubclass(current, BaseModel):
        # fields the loader sets (exclude=True: a tuning file's base_dir) are no file keys
        return [f.alias or name for name, f in current.model_fields.items() if not f.exclude]
    return []


def _strip(annotation: Any) -> Any:
    # Annotated[X, ...] -> X; Optional[X] -> X
    while typing.get_origin(annotation) is typing.Annotated:
        annotation = typing.get_args(annotation)[0]
    args = [a for a in typing.get_args(annotation) if a is not type(None)]
    if typing.get_origin(annotation) in (typing.Union, types.UnionType) and len(args) == 1:
        return _strip(args[0])
    return annotation


def _field_by_key(model: type[BaseModel], key: Any):
    for name, field in model.model_fields.items():
        if key in (name, field.alias):
            return field
    return None


def _union_member(args: tuple[Any, ...], tag: Any) -> Any:
    for member in args:
        member = _strip(member)
        if not (isinstance(member, type) and issubclass(member, BaseModel)):
            continue
        kind = member.model_fields.get("kind")
        if kind is not None and tag in typing.get_args(kind.annotation):
            return member
    return None


def _most_specific(details: list[dict[str, Any]]) -> dict[str, Any]:
    # a failed tagged union reports once per member; the deepest location is the useful one.
    # A plain union (a fraction or a pair of frequencies) also reports once per member,
    # under labels such as "tuple[...]"; at equal depth a member's own reading of the value
    # ("cannot read '0.5V' as a tolerance") says more than "Input should be a valid tuple"
    return max(
        details,
        key=lambda d: (len(_clean_location(d["loc"])), d["type"] == "value_error"),
    )


def _clean_location(loc: tuple[Any, ...]) -> list[str | int]:
    # pydantic inserts the union tag (e.g. "resistor") after the part name; drop it
    cleaned: list[str | int] = []
    for index, item in enumerate(loc):
        if index == 2 and loc[0] == "parts" and isinstance(item, str) and _is_tag(item):
            continue
        if isinstance(item, str) and (item.startswith("function-") or _is_member_label(item)):
            continue
        cleaned.append(item)
    return cleaned


def _is_member_label(item: str) -> bool:
    # pydantic names the members of a plain union in the location ("tuple[float, float]");
    # no key of a wirestate file contains brackets
    return "[" in item and item.endswith("]")


def _is_tag(item: str) -> bool:
    from wirestate.spec.circuit import PART_KINDS

    return item in PART_KINDS


def json_schema(model: type[BaseModel]) -> str:
    """The JSON Schema of a file format, pretty-printed."""
    return json.dumps(model.model_json_schema(mode="validation"), indent=2, sort_keys=False)
