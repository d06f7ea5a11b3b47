"""The project file (SQLite): schema, migrations, lock, records and catalogue queries.

``Project`` is the way in; the records are frozen dataclasses (``flakebook.store.records``).
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
    CatalogueRow,
    DeletedRows,
    Evidence,
    ExternalResult,
    Flake,
    FlakeHole,
    Hole,
    HolePattern,
    Image,
    ImageCheck,
    RecomputeReport,
    Record,
    Sample,
    SourceRef,
    Spectrum,
    Terrace,
    ThermometryResult,
    ThermometrySeries,
    layer_spacing_nm,
    record_to_dict,
)
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
    "CatalogueRow",
    "DeletedRows",
    "ImageCheck",
    "RecomputeReport",
    "parse_substrate",
    "record_to_dict",
]
