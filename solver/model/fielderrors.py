"""Pydantic validation errors as the model file's messages: a field path such as
``parts[3].size_mm[2]`` and a plain sentence, with the offending value where it can be shown."""
from __future__ import annotations

import json
import re

from pydantic import ValidationError

PROFILE_TYPES = ("constant", "step", "pulse", "table")  # the "type" values of a PROFILE (model file)

_MESSAGES = {
    "extra_forbidden": "unknown key (not part of format version 1)",
    "missing": "required field is missing",
    "finite_number": "must be a finite number",
    "float_type": "must be a number",
    "int_type": "must be a whole number",
    "string_type": "must be a text string",
    "list_type": "must be a list",
    "dict_type": "must be an object",
    "model_type": "must be an object",
    "model_attributes_type": "must be an object",
}


_PROFILE_FIELDS = ("profile", "ambient_c", "surroundings_c", "flux_w_m2")


def _path_of(loc) -> str:
    out = ""
    skip_next_tag = False
    for item in loc:
        if isinstance(item, int):
            out += f"[{item}]"
            continue
        if skip_next_tag and item in PROFILE_TYPES:
            skip_next_tag = False
            continue
        skip_next_tag = item in _PROFILE_FIELDS
        out += ("." if out else "") + str(item)
    return out


_TYPE_MISMATCH = ("float_type", "list_type", "int_type", "string_type")


def _is_branch_tag(item) -> bool:
    """pydantic's name of a union member in an error location, e.g. ``list[constrained-float]``."""
    return isinstance(item, str) and (item in ("float", "int", "str", "constrained-float", "constrained-int")
                                      or item.startswith("list["))


def _union_errors(errors) -> list:
    """Drop union members' tags from locations and keep the member that matches the input.

    For ``conductivity`` (a number or a list of three), a list input must not also be told
    "must be a number", nor a number "must be a list"; if no member matches, one message says both.
    """
    out, branches = [], {}
    for e in errors:
        loc = tuple(e["loc"])
        cut = next((i for i, item in enumerate(loc) if _is_branch_tag(item)), None)
        if cut is None:
            out.append(e)
            continue
        e = dict(e, loc=loc[:cut] + loc[cut + 1:])
        branches.setdefault(loc[:cut], []).append(e)
    for base, errs in branches.items():
        relevant = [e for e in errs if e["type"] not in _TYPE_MISMATCH or len(e["loc"]) > len(base)]
        if relevant:
            out.extend(relevant)
        else:
            shown = errs[0].get("input")
            out.append({"loc": base, "type": "value_error", "input": shown,
                        "msg": "must be a number or a list of three numbers (x, y, z)"
                               + (f" (got {json.dumps(shown)})" if _jsonable(shown) else "")})
    return out


def format_pydantic(err: ValidationError) -> list[tuple[str, str]]:
    issues = []
    for e in _union_errors(err.errors(include_url=False)):
        path = _path_of(e["loc"])
        kind = e["type"]
        msg = _MESSAGES.get(kind)
        if msg is None:
            msg = e["msg"]
            if msg.startswith("Value error, "):
                msg = msg[len("Value error, "):]
            msg = msg[0].lower() + msg[1:] if msg else msg
        if kind in ("float_type", "finite_number", "int_type", "string_type") and "input" in e:
            msg += f" (got {json.dumps(e['input']) if _jsonable(e['input']) else repr(e['input'])})"
        elif kind.startswith(("greater_than", "less_than", "too_short", "too_long", "literal_error")) and "input" in e:
            shown = e["input"]
            if not isinstance(shown, (list, dict)):
                msg += f" (got {json.dumps(shown) if _jsonable(shown) else repr(shown)})"
        if kind == "union_tag_invalid":
            msg = f"profile type must be one of {', '.join(PROFILE_TYPES)}"
        if kind == "union_tag_not_found":
            msg = "profile needs a \"type\" (" + ", ".join(PROFILE_TYPES) + ")"
        m = re.match(r"^(points\[\d+\]\[\d\]): (.*)$", msg or "")
        if m and path.endswith(".points"):
            path, msg = path[: -len("points")] + m.group(1), m.group(2)
        if path.endswith(("surroundings_c", "flux_w_m2")) and kind in ("model_type", "model_attributes_type",
                                                                         "dict_type"):
            msg = "must be a number or a profile object"
        if path.endswith("ambient_c") and kind in ("model_type", "model_attributes_type", "dict_type"):
            msg = "must be a number (°C) or a profile object"
        issues.append((path, msg))
    # the same path may be reported by several union branches: keep the first of each
    seen, unique = set(), []
    for p, m in issues:
        if p not in seen:
            seen.add(p)
            unique.append((p, m))
    return unique


def _jsonable(v) -> bool:
    try:
        json.dumps(v, allow_nan=False)
        return True
    except (TypeError, ValueError):
        return False
