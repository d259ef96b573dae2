"""The base of every settings section: the validated ``[section]`` of the config is the
settings object its stage receives.

A section is a frozen pydantic model that refuses unknown keys. Built directly (tests, the
``terrain`` command's options), a bad value raises :class:`regionmap.errors.ConfigError`
naming the section and the key, as a bad key in a config file does.
"""

from __future__ import annotations

import difflib
from typing import Any, ClassVar

from pydantic import BaseModel, ConfigDict, ValidationError

from regionmap.errors import ConfigError

__all__ = ["Settings", "validation_message"]


class Settings(BaseModel):
    """A config section: frozen, unknown keys refused, NaN and infinities refused."""

    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)
    #: the section's name in the config file
    section: ClassVar[str] = ""

    def __init__(self, **data: Any) -> None:
        try:
            super().__init__(**data)
        except ValidationError as exc:
            raise ConfigError(
                validation_message(exc, type(self), prefix=(self.section,) if self.section else ())
            ) from None


def _model_at(root: type[BaseModel], loc: tuple) -> type[BaseModel] | None:
    """The model class that holds the key at ``loc`` below ``root`` (for closest-key hints)."""
    model: Any = root
    dict_key = False
    for part in loc[:-1]:
        if isinstance(part, int) or dict_key:  # a list index or a key of a dict of sections
            dict_key = False
            continue
        field = (
            model.model_fields.get(part)
            if isinstance(model, type) and issubclass(model, BaseModel)
            else None
        )
        if field is None:
            return None
        model = _first_model(field.annotation)
        if model is None:
            return None
        dict_key = getattr(field.annotation, "__origin__", None) is dict
    return model


def _first_model(annotation) -> type[BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in getattr(annotation, "__args__", ()) or ():
        found = _first_model(arg)
        if found is not None:
            return found
    return None


def _key_name(loc: tuple) -> str:
    parts = [str(p) for p in loc if not isinstance(p, int)]
    if not parts:
        return "(top level)"
    if len(parts) == 1:
        return f"[{parts[0]}]"
    return f"[{'.'.join(parts[:-1])}] {parts[-1]}"


def validation_message(
    exc: ValidationError, root: type[BaseModel], *, source: str = "", prefix: tuple = ()
) -> str:
    """One line naming each bad key (``[section] key``), what was expected and what came;
    an unknown key gets the closest valid one as a hint.

    Parameters
    ----------
    exc : the validation error of ``root``.
    root : the model that was validated.
    source : the config file (or another origin) the line starts with.
    prefix : the section names above ``root`` (``("terrain",)`` for a section built alone).
    """
    messages = []
    seen = set()
    for err in exc.errors():
        loc = tuple(err["loc"])
        key = _key_name(prefix + loc)
        if key in seen:
            continue
        seen.add(key)
        if err["type"] == "extra_forbidden":
            model = _model_at(root, loc)
            valid = [v for v in (model.model_fields if model else []) if v != "source"]
            close = difflib.get_close_matches(str(loc[-1]), valid, n=1, cutoff=0.5)
            hint = (
                f"; did you mean {close[0]!r}?"
                if close
                else (f"; valid keys: {', '.join(valid)}" if valid else "")
            )
            messages.append(f"unknown key {key}{hint}")
        elif err["type"] == "missing":
            messages.append(f"missing required key {key}")
        else:
            got = err.get("input")
            msg = err["msg"].removeprefix("Value error, ")
            got_text = "" if isinstance(got, dict) or " got " in msg else f" (got {got!r})"
            messages.append(f"key {key}: {msg}{got_text}")
    text = "; ".join(messages)
    return f"{source}: {text}" if source else text
