"""The project file (SQLite): schema, migrations, lock, records and catalogue queries.

``Project`` is the one way in: every caller calls methods on an open project. Its methods are
written by concern, one module each, and brought together in ``flakebook.store.project``:

- ``project``: the core (open, create, close, transactions, lock, schema, generic record access)
  and the ``Project`` class itself;
- ``kinds``: each record kind's add and find functions and the rules of every add and update;
- ``provenance``: inputs of derived records, stale marks, ``recompute_stale``;
- ``files``: image files (stored paths, checks, embedded bytes, relink, pack);
- ``catalogue``: the catalogue, export rows, summary and canonical dump;
- ``handoff``: bundles for outside analyses and their results imported back.

The records are frozen dataclasses (``records``) and what operations return are in ``results``;
``rows`` maps records to table rows, ``codec`` codes arrays, ``schema`` holds the tables and
migrations, ``filecheck`` recognises a project file, ``lock`` keeps two programs from writing one
file, and ``recompute`` is the registry of recompute functions.
"""

from flakebook.store.lock import LockInfo, ProjectLocked
from flakebook.store.project import DEFAULT_MAX_LAYERS, SUFFIX, Project
from flakebook.store.recompute import (
    register_recomputer,
    registered_recomputers,
    unregister_recomputer,
)
from flakebook.store.records import (
    DERIVED_KINDS,
    KINDS,
    LAYER_SPACING_NM,
    Appearance,
    Assignment,
    BeamProfile,
    Calibration,
    Evidence,
    ExternalResult,
    Flake,
    FlakeHole,
    Hole,
    HolePattern,
    Image,
    RamanMap,
    Record,
    RuleCalibration,
    Sample,
    SourceRef,
    Spectrum,
    SpectrumFit,
    Terrace,
    ThermometryResult,
    ThermometrySeries,
    layer_spacing_nm,
    record_to_dict,
)
from flakebook.store.results import CatalogueRow, DeletedRows, ImageCheck, RecomputeReport
from flakebook.store.schema import SCHEMA_VERSION
from flakebook.substrate import SubstrateLayer, parse_substrate

__all__ = [
    "Project",
    "ProjectLocked",
    "LockInfo",
    "SUFFIX",
    "DEFAULT_MAX_LAYERS",
    "SCHEMA_VERSION",
    "register_recomputer",
    "unregister_recomputer",
    "registered_recomputers",
    "KINDS",
    "DERIVED_KINDS",
    "LAYER_SPACING_NM",
    "layer_spacing_nm",
    "Record",
    "SourceRef",
    "Sample",
    "SubstrateLayer",
    "HolePattern",
    "Image",
    "Flake",
    "Appearance",
    "Terrace",
    "Hole",
    "FlakeHole",
    "Spectrum",
    "BeamProfile",
    "Evidence",
    "Assignment",
    "ThermometrySeries",
    "ThermometryResult",
    "ExternalResult",
    "Calibration",
    "RuleCalibration",
    "SpectrumFit",
    "RamanMap",
    "CatalogueRow",
    "DeletedRows",
    "ImageCheck",
    "RecomputeReport",
    "parse_substrate",
    "record_to_dict",
]
