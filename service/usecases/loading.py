"""Reading catalogs and requests from JSON or YAML text, with every problem named by field."""

import json
import re
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


def field_problems(error: ValidationError) -> list[FieldProblem]:
    """Pydantic's errors as {field, reason}, the field a dotted path with list indexes."""
    return field_problems_from_list(list(error.errors(include_url=False)))


def field_problems_from_list(items: list[Any]) -> list[FieldProblem]:
    """The same, from the error dictionaries pydantic and FastAPI produce."""
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
        else:
            problems.append(FieldProblem(field=path or "(body)", reason=_plain(item["msg"])))
    return problems


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
        raise InvalidInput(f"{source} is not valid", field_problems(error)) from error


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
