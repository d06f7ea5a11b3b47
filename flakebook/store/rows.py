"""Mapping records to table rows: which columns a record kind stores and how values are coded.

A record's fields are stored one column each, in field order, except ``id`` (the row id), the
``inputs`` of derived records (the ``dependencies`` table, :mod:`flakebook.store.provenance`) and
an image's ``embedded`` mark (whether ``image_data`` holds its bytes). A field's ``codec``
metadata says how it is coded: arrays as blobs (:mod:`flakebook.store.codec`), JSON, tuples,
booleans, substrate stacks and hole patterns.
"""

from __future__ import annotations

import dataclasses
import json
from typing import Any

from flakebook.errors import InputError, ProjectError
from flakebook.store import codec
from flakebook.store.records import KINDS, HolePattern, Image, Record
from flakebook.substrate import SubstrateLayer

# Columns that are no dataclass field (area_um2; terraces.flake_id, appearances.pixel_size_um):
# kept in step with the records on every write, for the catalogue's speed.
AREA_TABLES = frozenset({"appearances", "terraces"})

#: table name -> record kind name
TABLE_KINDS = {cls.TABLE: kind for kind, cls in KINDS.items()}


@dataclasses.dataclass(frozen=True)
class Layout:
    """How one record kind is stored."""

    cls: type[Record]
    columns: tuple[str, ...]  # stored columns in field order (no id)
    codecs: dict[str, str | None]
    select: str  # "SELECT id, col... FROM table"


_LAYOUTS: dict[type[Record], Layout] = {}


def layout(cls: type[Record]) -> Layout:
    """The stored layout of a record class (worked out once, then kept)."""
    lay = _LAYOUTS.get(cls)
    if lay is None:
        cols, codecs = [], {}
        for f in dataclasses.fields(cls):
            c = f.metadata.get("codec")
            if f.name == "id" or c in ("inputs", "embedded"):
                continue
            cols.append(f.name)
            codecs[f.name] = c
        extra = ""
        if cls is Image:
            extra = ", EXISTS(SELECT 1 FROM image_data d WHERE d.image_id = images.id)"
        select = f"SELECT id, {', '.join(cols)}{extra} FROM {cls.TABLE}"
        lay = Layout(cls, tuple(cols), codecs, select)
        _LAYOUTS[cls] = lay
    return lay


def encode(codec_name: str | None, value: Any) -> Any:
    """A field value as stored in its column."""
    if codec_name is None:
        return value
    if codec_name == "array":
        return None if value is None else codec.encode_array(value)
    if codec_name in ("json", "tuple"):
        return json.dumps(list(value) if codec_name == "tuple" else value, ensure_ascii=False)
    if codec_name == "bool":
        return 1 if value else 0
    if codec_name == "substrate":
        return json.dumps([layer.to_dict() for layer in value], ensure_ascii=False)
    if codec_name == "pattern":
        return None if value is None else json.dumps(value.to_dict())
    raise AssertionError(codec_name)  # pragma: no cover


def decode(codec_name: str | None, value: Any) -> Any:
    """A column value as the field value it stores."""
    if codec_name is None:
        return value
    if codec_name == "array":
        return codec.decode_array(value)
    if codec_name == "json":
        return json.loads(value)
    if codec_name == "tuple":
        return tuple(json.loads(value))
    if codec_name == "bool":
        return bool(value)
    if codec_name == "substrate":
        return tuple(SubstrateLayer(d["material"], d["thickness_nm"]) for d in json.loads(value))
    if codec_name == "pattern":
        return None if value is None else HolePattern(**json.loads(value))
    raise AssertionError(codec_name)  # pragma: no cover


def construct(cls: type[Record], kwargs: dict[str, Any]) -> Record:
    """A record read from its row; a row the record refuses is a damaged file."""
    try:
        return cls(**kwargs)
    except (InputError, TypeError) as exc:
        raise ProjectError(
            f"a stored {cls.KIND} (id {kwargs.get('id')}) cannot be read: {exc}"
        ) from None
