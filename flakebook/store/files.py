"""Image files: where a micrograph's file is, whether it is still the one recorded, finding it
again, and packing the bytes into the project.

An image record keeps its file's path (relative to the project's folder where possible), SHA-256
and size; the bytes themselves may also be embedded (table ``image_data``). A file whose hash
differs from the recorded one is never used silently.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

from flakebook.errors import InputError, ProjectError, check_cancel
from flakebook.store._util import (
    NotRegularFile,
    Progress,
    RecordRef,
    id_of,
    read_regular,
    sha256_file,
    special_kind,
)
from flakebook.store.filecheck import SUFFIX
from flakebook.store.records import Image
from flakebook.store.results import ImageCheck


def stored_path(folder: Path, file: Path) -> str:
    """How a project in ``folder`` records the path of ``file``: relative to the folder where
    possible, POSIX style."""
    target = file.resolve()
    try:
        return Path(os.path.relpath(target, folder)).as_posix()
    except ValueError:  # another drive (Windows): keep it absolute
        return target.as_posix()


class ImageFiles:
    """Image files on disk and embedded (a mixin of :class:`~flakebook.store.project.Project`).

    Relies on the project core: ``_db``, ``_path``, ``folder``, ``transaction``, ``get`` and
    ``_select``.
    """

    def image_file(self, image: RecordRef) -> Path:
        """Where an image's file is expected on disk (it may be missing)."""
        img = image if isinstance(image, Image) else self.get(Image, id_of(image))
        return (
            (self.folder / img.path).resolve()
            if not Path(img.path).is_absolute()
            else Path(img.path)
        )

    def _check_one(self, img: Image) -> ImageCheck:
        file = self.image_file(img)
        note = ""
        try:
            st = file.stat()
            kind = special_kind(st.st_mode)
            if kind is not None:
                status, note = "missing", f"not a regular file ({kind})"
            elif st.st_size != img.size_bytes or sha256_file(file)[0] != img.sha256:
                status = "changed"
            else:
                status = "ok"
        except NotRegularFile:  # replaced by a FIFO or device since the stat
            status, note = "missing", "not a regular file"
        except OSError:
            status = "missing"
        return ImageCheck(img.id, img.path, status, img.embedded, str(file), note)

    def images_outside_folder(self) -> list[ImageCheck]:
        """Images not embedded whose file lies outside the project's folder (a stored path
        leading out of it, or a link to elsewhere), as checks of status ``outside``: reported
        before their bytes are read."""
        out = []
        for img in self._select(Image, "id NOT IN (SELECT image_id FROM image_data)"):
            file = self.image_file(img)
            if not file.is_relative_to(self.folder):
                out.append(ImageCheck(img.id, img.path, "outside", False, str(file)))
        return out

    def check_images(self, progress: Progress | None = None, cancel=None) -> list[ImageCheck]:
        """The state of every image's file: ``ok``, ``missing`` or ``changed`` (its hash
        differs from the one recorded). A changed file is never used silently."""
        images = self._select(Image)
        out = []
        for i, img in enumerate(images):
            check_cancel(cancel)
            out.append(self._check_one(img))
            if progress is not None:
                progress((i + 1) / len(images), img.path)
        return out

    def image_bytes(self, image: RecordRef) -> bytes:
        """An image's content: the embedded copy, else the file (checked against its hash)."""
        iid = id_of(image)
        row = self._db.execute("SELECT data FROM image_data WHERE image_id = ?", (iid,)).fetchone()
        if row is not None:
            return bytes(row[0])
        img = self.get(Image, iid)
        file = self.image_file(img)
        try:
            data = read_regular(file)
        except NotRegularFile as exc:
            raise ProjectError(
                f"image {img.path} of {self._path.name} is {exc.strerror or exc} and is not "
                "read; relink it (flakebook relink PROJECT --search DIR)"
            ) from None
        except OSError:
            raise ProjectError(
                f"image {img.path} of {self._path.name} is missing (looked at {file}); "
                "relink it (flakebook relink PROJECT --search DIR)"
            ) from None
        if hashlib.sha256(data).hexdigest() != img.sha256:
            raise ProjectError(
                f"image {img.path} has changed since it was added (its SHA-256 differs); "
                "relink it to the original file"
            )
        return data

    def relink(
        self, search_dir: str | os.PathLike, progress: Progress | None = None, cancel=None
    ) -> dict[str, list]:
        """Find missing or changed images again by their SHA-256 under ``search_dir``.

        Returns ``{"relinked": [(image_id, new_path)], "not_found": [image_id]}``; only the
        stored paths change (the content is the same, so nothing becomes stale).
        """
        root = Path(search_dir)
        if not root.is_dir():
            raise InputError(f"--search {root} is not a folder")
        wanted = [c for c in self.check_images(cancel=cancel) if c.status != "ok"]
        if not wanted:
            return {"relinked": [], "not_found": []}
        images = {c.image_id: self.get(Image, c.image_id) for c in wanted}
        sizes = {img.size_bytes for img in images.values()}
        by_hash: dict[str, Path] = {}
        candidates = [
            Path(d) / name
            for d, _dirs, files in os.walk(root)
            for name in files
            if not name.endswith((SUFFIX, ".lock", "-journal"))
        ]
        for i, path in enumerate(candidates):
            check_cancel(cancel)
            try:
                st = path.stat()
                if special_kind(st.st_mode) is None and st.st_size in sizes:
                    by_hash.setdefault(sha256_file(path)[0], path)
            except OSError:  # gone, unreadable, or no longer a regular file
                continue
            if progress is not None:
                progress((i + 1) / len(candidates), path.name)
        relinked, not_found = [], []
        with self.transaction():
            for iid, img in images.items():
                found = by_hash.get(img.sha256)
                if found is None:
                    not_found.append(iid)
                    continue
                new_path = stored_path(self.folder, found)
                self._db.execute("UPDATE images SET path = ? WHERE id = ?", (new_path, iid))
                relinked.append((iid, new_path))
        return {"relinked": relinked, "not_found": not_found}

    def pack(self, progress: Progress | None = None, cancel=None) -> int:
        """Embed every referenced image's bytes so the file stands alone; returns how many were
        added. All or nothing: a missing or changed image raises :class:`ProjectError`. Only
        regular files are read (never a FIFO or a device), and only bytes whose SHA-256 is the
        one recorded are embedded; :meth:`images_outside_folder` lists the files outside the
        project's folder that this reads."""
        todo = self._select(Image, "id NOT IN (SELECT image_id FROM image_data)")
        checks = [self._check_one(img) for img in todo]
        bad = [c for c in checks if c.status != "ok"]
        if bad:
            names = ", ".join(
                f"{c.path} ({c.status}: {c.note})" if c.note else f"{c.path} ({c.status})"
                for c in bad[:3]
            )
            more = f" and {len(bad) - 3} more" if len(bad) > 3 else ""
            raise ProjectError(
                f"cannot pack {self._path.name}: {names}{more}.\n"
                "Relink the images first (flakebook relink PROJECT --search DIR); nothing was changed"
            )
        with self.transaction():
            for i, img in enumerate(todo):
                check_cancel(cancel)
                try:
                    data = read_regular(self.image_file(img))
                except OSError as exc:
                    raise ProjectError(
                        f"image {img.path} cannot be read while packing "
                        f"({exc.strerror or exc}); nothing was changed"
                    ) from None
                if hashlib.sha256(data).hexdigest() != img.sha256:
                    raise ProjectError(
                        f"image {img.path} changed while packing; nothing was changed"
                    )
                self._db.execute(
                    "INSERT INTO image_data (image_id, data) VALUES (?, ?)", (img.id, data)
                )
                if progress is not None:
                    progress((i + 1) / len(todo), img.path)
        return len(todo)
