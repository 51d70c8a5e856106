"""Reading catalogs and requests from JSON or YAML text, with every problem named by field."""

import difflib
import json
import re
import types
import typing
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any, TypeVar

import yaml
from pydantic import BaseModel, ValidationError

from service.contract.catalog import ReferenceProblems
from service.errors import FieldProblem, InvalidInput

Model = TypeVar("Model", bound=BaseModel)


def parse_document(text: str, *, source: str) -> Any:
    """JSON, or YAML when it is not JSON. A document nested deeper than any catalog or request is
    refused rather than parsed to the end of the stack."""
    try:
        return json.loads(text)
    except RecursionError as error:
        raise InvalidInput(f"{source} is nested too deeply", [TOO_DEEP]) from error
    except json.JSONDecodeError as json_error:
        try:
            return yaml.safe_load(text)
        except RecursionError as error:
            raise InvalidInput(f"{source} is nested too deeply", [TOO_DEEP]) from error
        except yaml.YAMLError:
            raise InvalidInput(f"{source} is neither valid JSON nor YAML: {json_error}") from json_error


TOO_DEEP = FieldProblem("(body)", "objects and lists are nested too deeply to be a catalog or a request")


def field_problems(error: ValidationError, model: type[BaseModel] | None = None) -> list[FieldProblem]:
    """Pydantic's errors as {field, reason}, the field a dotted path with list indexes."""
    return field_problems_from_list(list(error.errors(include_url=False)), model)


def field_problems_from_list(items: list[Any], model: type[BaseModel] | None = None) -> list[FieldProblem]:
    """The same, from the error dictionaries pydantic and FastAPI produce. With the `model` that was
    validated, an unknown field close to a known one gets a "did you mean"."""
    problems = []
    for item in items:
        location = list(item["loc"])
        if location[:1] == ["body"]:  # FastAPI puts the body's fields under "body"
            location = location[1:]
        path = ".".join(str(part) for part in location if not _is_union_tag(part))
        if item.get("type") == "json_invalid":
            detail = item.get("ctx", {}).get("error", "")
            problems.append(FieldProblem("(body)", f"the body is not valid JSON: {detail}"))
            continue
        cause = item.get("ctx", {}).get("error")
        if isinstance(cause, ReferenceProblems):
            prefix = f"{path}." if path else ""
            problems += [FieldProblem(prefix + field, reason) for field, reason in cause.problems]
        elif item.get("type") == "extra_forbidden" and location:
            known = None if model is None else fields_at(model, location[:-1])
            match = None if not known else closest(str(location[-1]), known)
            reason = f"unknown field; did you mean {match!r}?" if match else "unknown field"
            problems.append(FieldProblem(field=path, reason=reason))
        else:
            problems.append(FieldProblem(field=path or "(body)", reason=_plain(item["msg"])))
    return problems


def closest(name: str, known: Iterable[str]) -> str | None:
    """The known name a mistyped one most likely meant, if any is close (difflib's ratio ≥ 0.6)."""
    matches = difflib.get_close_matches(name, sorted(known), n=1, cutoff=0.6)
    return matches[0] if matches else None


def fields_at(model: type[BaseModel], location: Sequence[Any]) -> set[str] | None:
    """The field names of the object found at `location` (an error's path) inside `model`, following
    nested models, lists, dicts, optional values and unions (a discriminated union's tag, which pydantic
    puts in the path, picks the member); None when the path leads to no model."""
    current: Any = model
    for part in location:
        current = _step(current, part)
        if current is None:
            return None
    current = _unwrap(current)
    if isinstance(current, type) and issubclass(current, BaseModel):
        return {field.alias or name for name, field in current.model_fields.items()}
    return None


def _unwrap(annotation: Any) -> Any:
    while typing.get_origin(annotation) is typing.Annotated:
        annotation = typing.get_args(annotation)[0]
    return annotation


def _step(annotation: Any, part: Any) -> Any:
    annotation = _unwrap(annotation)
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        members = [m for m in typing.get_args(annotation) if m is not type(None)]
        for member in members:  # a discriminated union's tag names the member
            if isinstance(member, type) and issubclass(member, BaseModel) and any(
                    part in typing.get_args(_unwrap(f.annotation)) for f in member.model_fields.values()
                    if typing.get_origin(_unwrap(f.annotation)) is typing.Literal):
                return member
        stepped = (_step(member, part) for member in members)
        return next((s for s in stepped if s is not None), None)
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        for name, field in annotation.model_fields.items():
            if part in (name, field.alias):
                return field.annotation
        return None
    if origin in (list, tuple) and isinstance(part, int):
        return typing.get_args(annotation)[0]
    if origin is dict:
        return typing.get_args(annotation)[1]
    return None


def _plain(message: str) -> str:
    # Pydantic prefixes messages of our own validators with "Value error, ", and names the model class
    # where it wants an object ("a valid dictionary or instance of CampaignIn"): neither means anything
    # to the caller.
    return re.sub(r" or instance of \w+", "", message.removeprefix("Value error, "))


def _is_union_tag(part: object) -> bool:
    # Discriminated unions insert the tag ("transformer", "colocation"...) into the location.
    return isinstance(part, str) and part in {"transformer", "flops", "measured", "colocation", "owned"}


def validate(model: type[Model], data: Any, *, source: str) -> Model:
    if not isinstance(data, dict):  # e.g. text that is neither JSON nor a YAML mapping
        kind = "nothing" if data is None else f"a {type(data).__name__}"
        raise InvalidInput(f"{source} is not valid", [FieldProblem("(body)", f"expected a JSON or YAML object, "
                                                                             f"found {kind}")])
    try:
        # Validated as the JSON it is (or as JSON of the YAML): strict, as request bodies are (a `false`
        # is not a 0), once the numbers YAML 1.1 leaves as text are numbers again (PyYAML reads 1.4e12
        # and 1e12 as strings: its floats need a dot and a signed exponent).
        return model.model_validate_json(json.dumps(_yaml_exponents(data), default=str))
    except ValidationError as error:
        raise InvalidInput(f"{source} is not valid", field_problems(error, model)) from error


EXPONENT_NUMBER = re.compile(r"[-+]?(\d+(\.\d*)?|\.\d+)[eE][-+]?\d+")


def _yaml_exponents(data: Any) -> Any:
    if isinstance(data, dict):
        return {key: _yaml_exponents(value) for key, value in data.items()}
    if isinstance(data, list):
        return [_yaml_exponents(value) for value in data]
    if isinstance(data, str) and EXPONENT_NUMBER.fullmatch(data):
        return float(data)
    return data


def load_file(model: type[Model], path: Path) -> Model:
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as error:
        raise InvalidInput(f"cannot read {path}: {error.strerror}") from error
    return validate(model, parse_document(text, source=str(path)), source=str(path))
