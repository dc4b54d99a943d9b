"""Resume by content: fingerprints of what made each product, and what a rerun may reuse.

Every product of ``tem run`` is recorded in ``run.json`` with the checksum
(SHA-256) it had when written, and with the *fingerprint* of what made it: a
hash of the stage, the tool version, the stage's settings and the checksums of
its inputs (for a station's stack: its recordings and its part of the survey
description; later stages: the products they read). A rerun without
``--from`` reuses a product whose fingerprint is unchanged and whose file still
has its recorded checksum, and redoes the stale ones; a product whose checksum
changed since it was written (edited by hand, or damaged) is moved to
``edited/<time>/`` (:func:`keep_edited`), reported, and redone. Checksums of large inputs are cached by size and modification time.
"""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

from .. import __version__
from ..io.checks import real_path
from ..provenance import file_sha256

__all__ = ["Checksums", "fingerprint", "station_survey_text", "reusable", "changed_products",
           "keep_edited", "EDITED"]


class Checksums:
    """SHA-256 of files, reusing a recorded value when size and modification time are unchanged."""

    def __init__(self, previous=None, table=None):
        # ``previous`` (an earlier run's table) and ``table`` may be spooled mappings
        # (tem.io.spool): neither is copied into memory
        self.previous = previous if previous is not None else {}
        self.table = table if table is not None else {}

    def of(self, path) -> str:
        """SHA-256 of ``path``; a file that is missing or unreadable gives a marker instead.

        The marker (``unreadable:<path>``) never equals a checksum, so whatever was
        made from such a file is redone, and the stage that reads it refuses it in
        one line (its station fails; ``--from`` on a project whose earlier products
        were removed). Raising here would end the whole run in a traceback.
        """
        p = Path(path)
        key = str(real_path(p))
        try:
            st = p.stat()
            if not p.is_file():
                return f"unreadable:{key}"
        except OSError:
            return f"unreadable:{key}"
        for known in (self.table.get(key), self.previous.get(key)):
            if known and known.get("size") == st.st_size and known.get("mtime_ns") == st.st_mtime_ns:
                sha = known["sha256"]
                break
        else:
            try:
                sha = file_sha256(p)
            except OSError:
                return f"unreadable:{key}"
        self.table[key] = {"size": st.st_size, "mtime_ns": st.st_mtime_ns, "sha256": sha}
        return sha


    def forget(self, path):
        """Drop what is known of ``path`` (it was just written)."""
        key = str(real_path(path))
        self.table.pop(key, None)
        self.previous.pop(key, None)


def fingerprint(stage: str, settings: dict, input_sums, extra=None) -> str:
    """Hash of what makes a product: stage, tool version, settings, input checksums."""
    payload = json.dumps({"stage": stage, "tem_version": __version__, "settings": settings,
                          "inputs": sorted(input_sums), "extra": extra}, sort_keys=True,
                         default=str)
    return hashlib.sha256(payload.encode()).hexdigest()


def station_survey_text(survey, station_id) -> str:
    """The part of the survey description one station's stack depends on."""
    from ..survey import replace, survey_to_dict

    one = replace(survey, stations=[survey.station(station_id)])
    doc = survey_to_dict(one)
    doc["survey"].pop("name", None)
    return json.dumps(doc, sort_keys=True)


def changed_products(project, recorded: dict, sums: Checksums) -> tuple:
    """(missing, changed) relative paths among ``recorded`` ``{relpath: sha256}``."""
    missing, changed = [], []
    for rel, sha in recorded.items():
        p = project.root / rel
        if not p.is_file():
            missing.append(rel)
        elif sums.of(p) != sha:
            changed.append(rel)
    return missing, changed


def reusable(project, record: dict | None, fp: str, sums: Checksums) -> bool:
    """Whether a recorded product set (station or stage) can be reused: same fingerprint,
    every product there with its recorded checksum. A product changed since it was written
    is not reused; :func:`keep_edited` keeps it before it is written anew, and says so."""
    if not record or record.get("fingerprint") != fp or record.get("status", "ok") != "ok":
        return False
    recorded = record.get("checksums") or {}
    if not recorded:
        return False
    missing, changed = changed_products(project, recorded, sums)
    return not missing and not changed


#: Folder of a project where hand-edited products are kept before their stage is redone.
EDITED = "edited"


def keep_edited(project, recorded: dict, sums: Checksums, stage: str, stamp: str) -> list:
    """Move the products among ``recorded`` (``{relpath: sha256}``) whose checksum changed
    since they were written (edited by hand) to ``edited/<stamp>/<relpath>``, before their
    stage writes them anew; returns one note per file kept.

    A redone stage would otherwise replace a hand-edited file without a word (``--from``
    redoes a stage whatever its record says; a rerun redoes a changed product): the edit
    is kept instead, and said. A move within the project (one rename), so nothing is
    copied; a move that fails is a :class:`tem.errors.TemOutputError` (one line, exit 1).
    """
    import os

    from ..errors import TemOutputError

    _, changed = changed_products(project, recorded, sums)
    notes = []
    for rel in changed:
        src = project.root / rel
        dst = project.root / EDITED / stamp / rel
        try:
            dst.parent.mkdir(parents=True, exist_ok=True)
            os.replace(src, dst)
        except OSError as exc:
            raise TemOutputError(exc.errno or 0, f"{src}: cannot keep the hand-edited file "
                                 f"before the {stage} stage replaces it: {exc.strerror or exc}") \
                from None
        sums.forget(src)
        notes.append(f"{rel} changed since the {stage} stage wrote it (edited by hand?); kept "
                     f"as {EDITED}/{stamp}/{rel}, and redone")
    return notes
