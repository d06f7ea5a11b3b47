"""Provenance: what each derived record was computed from, stale marks, and recomputing.

A derived record (evidence, assignment, thermometry result) lists its inputs (kind, id,
revision) in the ``dependencies`` table. When a record changes or is deleted, everything computed
from it is marked stale, transitively; :meth:`Provenance.recompute_stale` brings stale records up
to date with the functions registered in :mod:`flakebook.store.recompute` (the registry; the
physics lives outside the store).

The functions here take the open connection: the project core calls them on every add, update,
delete and restore. The :class:`Provenance` mixin gives :class:`~flakebook.store.project.Project`
its public methods for stale records.
"""

from __future__ import annotations

import dataclasses
import sqlite3
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any

import flakebook
from flakebook.errors import Cancelled, InputError, ProjectError, check_cancel
from flakebook.store._util import Progress, qmarks
from flakebook.store.recompute import registered_recomputers
from flakebook.store.records import (
    DERIVED_KINDS,
    KINDS,
    Record,
    SourceRef,
    record_type,
)
from flakebook.store.results import RecomputeReport

# ---- the dependency graph, on a connection ------------------------------------------------


def current_revision(con: sqlite3.Connection, kind: str, rid: int) -> int | None:
    """The stored revision of a record, or None when it is not stored."""
    cls = record_type(kind)
    row = con.execute(f"SELECT revision FROM {cls.TABLE} WHERE id = ?", (rid,))
    row = row.fetchone()
    return None if row is None else int(row[0])


def check_inputs(con: sqlite3.Connection, rec: Record) -> None:
    """Refuse a derived record whose inputs are no record kind or are not stored."""
    for ref in rec.inputs:
        if ref.kind not in KINDS:
            raise InputError(f"input {ref} is not a record kind")
        if current_revision(con, ref.kind, ref.id) is None:
            raise InputError(f"input {ref.kind} {ref.id} of this {rec.KIND} is not stored")


def outdated(con: sqlite3.Connection, refs: Iterable[SourceRef]) -> bool:
    """True when any input has changed since (its stored revision differs)."""
    return any(current_revision(con, r.kind, r.id) != r.revision for r in refs)


def read_inputs(con: sqlite3.Connection, kind: str, rid: int) -> tuple[SourceRef, ...]:
    """The inputs of a stored derived record, in their order."""
    return tuple(
        SourceRef(k, i, r)
        for k, i, r in con.execute(
            "SELECT input_kind, input_id, input_revision FROM dependencies "
            "WHERE derived_kind = ? AND derived_id = ? ORDER BY position",
            (kind, rid),
        )
    )


def write_inputs(con: sqlite3.Connection, rec: Record) -> None:
    """Store a derived record's inputs (replacing those stored before)."""
    con.execute(
        "DELETE FROM dependencies WHERE derived_kind = ? AND derived_id = ?",
        (rec.KIND, rec.id),
    )
    con.executemany(
        "INSERT INTO dependencies (derived_kind, derived_id, position, input_kind, input_id, "
        "input_revision) VALUES (?, ?, ?, ?, ?, ?)",
        [(rec.KIND, rec.id, i, r.kind, r.id, r.revision) for i, r in enumerate(rec.inputs)],
    )


def mark_dependents(con: sqlite3.Connection, kind: str, rid: int) -> list[tuple[str, int]]:
    """Mark everything computed from a record stale (transitively); returns the (table, id)
    of records that were not stale before."""
    todo, seen, newly = [(kind, rid)], set(), []
    while todo:
        k, i = todo.pop()
        rows = con.execute(
            "SELECT DISTINCT derived_kind, derived_id FROM dependencies "
            "WHERE input_kind = ? AND input_id = ?",
            (k, i),
        ).fetchall()
        for dk, did in rows:
            if (dk, did) in seen or dk not in KINDS:
                continue
            seen.add((dk, did))
            table = KINDS[dk].TABLE
            cur = con.execute(f"UPDATE {table} SET stale = 1 WHERE id = ? AND stale = 0", (did,))
            if cur.rowcount:
                newly.append((table, did))
            todo.append((dk, did))
    return newly


def dependency_rows(con: sqlite3.Connection, doomed: Mapping[str, set[int]]) -> list[tuple]:
    """The ``dependencies`` rows of the derived records among ``doomed`` (table -> ids), as
    kept for undoing a delete."""
    out = []
    for kind in DERIVED_KINDS:
        ids = doomed.get(KINDS[kind].TABLE)
        if ids:
            out.extend(
                con.execute(
                    "SELECT derived_kind, derived_id, position, input_kind, input_id, "
                    f"input_revision FROM dependencies WHERE derived_kind = ? AND "
                    f"derived_id IN ({qmarks(ids)})",
                    (kind, *sorted(ids)),
                ).fetchall()
            )
    return out


def drop_orphan_dependencies(con: sqlite3.Connection) -> None:
    """Remove the ``dependencies`` rows of derived records that no longer exist."""
    for kind in DERIVED_KINDS:
        con.execute(
            f"DELETE FROM dependencies WHERE derived_kind = ? AND derived_id NOT IN "
            f"(SELECT id FROM {KINDS[kind].TABLE})",
            (kind,),
        )


def restore_dependencies(con: sqlite3.Connection, rows: Sequence[tuple]) -> None:
    """Put back ``dependencies`` rows kept by :func:`dependency_rows`."""
    con.executemany(
        "INSERT OR IGNORE INTO dependencies (derived_kind, derived_id, position, "
        "input_kind, input_id, input_revision) VALUES (?, ?, ?, ?, ?, ?)",
        rows,
    )


# ---- the project's methods -----------------------------------------------------------------


class Provenance:
    """Stale derived records and bringing them up to date (a mixin of
    :class:`~flakebook.store.project.Project`).

    Relies on the project core: ``_db`` (the connection), ``transaction``, ``get``, ``_select``,
    ``_write_update`` and ``now``.
    """

    def stale_records(self) -> list[Record]:
        """Every derived record marked stale (evidence, assignments, thermometry results)."""
        out: list[Record] = []
        for kind in DERIVED_KINDS:
            out.extend(self._select(KINDS[kind], "stale = 1"))
        return out

    def recompute_stale(
        self,
        recompute: Mapping[str, Callable] | None = None,
        progress: Progress | None = None,
        cancel=None,
    ) -> RecomputeReport:
        """Bring every stale derived record up to date, as one action.

        Each record's ``method`` picks its recompute function: ``recompute`` (method -> function)
        first, then those registered with ``register_recomputer``. A function gets
        ``(project, record)`` and returns the new record or a dict of changed fields; the store
        saves it, records its inputs' current revisions and clears the mark. Records come after
        the stale records they are computed from. Records whose method has no function, or
        whose function fails, stay stale and are reported. Cancelling (``cancel`` set) undoes
        the whole run.
        """
        registry = registered_recomputers(recompute)
        recomputed, unregistered, failed = [], [], []
        with self.transaction():
            pending = self.stale_records()
            total = max(1, len(pending))
            stuck: set[tuple[str, int]] = set()  # records that stay stale
            while pending:
                stale_now = {(r.KIND, r.id) for r in pending}
                ready = [
                    r for r in pending if not any((x.kind, x.id) in stale_now for x in r.inputs)
                ]
                if not ready:  # a cycle of records computed from each other
                    for rec in pending:
                        failed.append((rec.KIND, rec.id, "it is computed from itself (a cycle)"))
                    break
                for rec in ready:
                    check_cancel(cancel)
                    if progress is not None:
                        done = len(recomputed) + len(unregistered) + len(failed)
                        progress(done / total, f"{rec.KIND} {rec.id}")
                    problem = self._recompute_one(self.get(type(rec), rec.id), registry)
                    if problem is None:
                        recomputed.append((rec.KIND, rec.id))
                        continue
                    stuck.add((rec.KIND, rec.id))
                    if problem == "unregistered":
                        unregistered.append((rec.KIND, rec.id, rec.method))
                    else:
                        failed.append((rec.KIND, rec.id, problem))
                pending = [r for r in pending if r not in ready]
                # What is computed from a record that stays stale cannot be brought up to date.
                changed = True
                while changed:
                    changed = False
                    for rec in list(pending):
                        blocker = next((x for x in rec.inputs if (x.kind, x.id) in stuck), None)
                        if blocker is not None:
                            failed.append(
                                (
                                    rec.KIND,
                                    rec.id,
                                    f"its input {blocker.kind} {blocker.id} stays stale",
                                )
                            )
                            stuck.add((rec.KIND, rec.id))
                            pending.remove(rec)
                            changed = True
        if progress is not None:
            progress(1.0, "done")
        return RecomputeReport(tuple(recomputed), tuple(unregistered), tuple(failed))

    def _recompute_one(self, rec: Record, registry: Mapping[str, Callable]) -> str | None:
        """Recompute one record; returns None when done, else what kept it stale."""
        fn = registry.get(rec.method)
        if fn is None:
            return "unregistered"
        missing = [r for r in rec.inputs if current_revision(self._db, r.kind, r.id) is None]
        if missing:
            return f"its input {missing[0].kind} {missing[0].id} was deleted"
        try:
            with self.transaction():
                self._store_recomputed(rec, fn(self, rec))
        except Cancelled:
            raise
        except Exception as exc:  # noqa: BLE001 - reported; the record stays stale
            return f"{type(exc).__name__}: {exc}"
        return None

    def _store_recomputed(self, rec: Record, result: Any) -> None:
        if isinstance(result, Mapping):
            new = dataclasses.replace(rec, **result)
        elif isinstance(result, type(rec)):
            new = result
        else:
            raise ProjectError(
                f"the recompute function of {rec.method!r} returned {type(result).__name__}; "
                f"accepted: a {type(rec).__name__} or a dict of changed fields"
            )
        refs = tuple(
            SourceRef(r.kind, r.id, current_revision(self._db, r.kind, r.id) or r.revision)
            for r in new.inputs
        )
        new = dataclasses.replace(
            new,
            id=rec.id,
            inputs=refs,
            stale=False,
            flakebook_version=flakebook.__version__,
            computed_at=self.now(),
        )
        check_inputs(self._db, new)
        self._write_update(rec, new, clear_stale=True)
