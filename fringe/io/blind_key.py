"""The blinding key file of ``fringe fit --blind KEYFILE``: its record, reader and writer.

The key (JSON, format "blind-key", version 1) holds the secret offsets added to the blinded
result, the offsets they make in the C10 harmonics, the SHA-256 of the blinded result it belongs
to and the settings hash of that fit; ``fringe unblind`` adds when it was used and the settings
hash at that moment (``docs/fit.md``, "Blind analysis"). :func:`write_key` writes it whole or not
at all with mode 0600 (owner read/write only) and never over an existing file unless asked;
:func:`read_key` checks every field (one-line errors "PATH: FIELD: EXPECTED").
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass, field, replace
from pathlib import Path

from fringe.conventions import HARMONIC_NAMES
from fringe.errors import InputFileError, check_regular_file
from fringe.io.records import Fields, check_depth, plain

__all__ = ["KEY_FORMAT", "BlindKey", "read_key", "write_key"]

KEY_FORMAT = "blind-key"
_HEX64 = re.compile(r"[0-9a-f]{64}")
_KEYS = ("fringe_format", "fringe_format_version", "key_id", "created_utc", "spread_sigmas",
         "offsets", "harmonic_offsets", "result_sha256", "settings_sha256", "unblinded")


@dataclass(frozen=True)
class BlindKey:
    """What a key file holds (module docstring).

    Attributes
    ----------
    key_id : str
        Random hex id, also written in the blinded result (``blinding.key_id``).
    created_utc : str
    spread_sigmas : float
        The offsets were drawn from a normal distribution of this many sigma of each
        coefficient.
    offsets : dict of str to float
        Offset of each free coefficient (coefficient units).
    harmonic_offsets : tuple of float
        The offsets' C10 harmonics (observable units, order of HARMONIC_NAMES).
    result_sha256 : str
        SHA-256 of the blinded result file ("" before it is bound).
    settings_sha256 : str
        Settings hash of the blinded fit.
    unblinded : dict or None
        ``{"utc", "settings_sha256", "result_sha256"}`` once used by ``fringe unblind``.
    """

    key_id: str
    created_utc: str
    spread_sigmas: float
    offsets: dict
    harmonic_offsets: tuple
    result_sha256: str = ""
    settings_sha256: str = ""
    unblinded: dict | None = field(default=None)

    def to_dict(self) -> dict:
        """The key file's JSON."""
        return plain({"fringe_format": KEY_FORMAT, "fringe_format_version": 1,
                      "key_id": self.key_id, "created_utc": self.created_utc,
                      "spread_sigmas": self.spread_sigmas, "offsets": dict(self.offsets),
                      "harmonic_offsets": list(self.harmonic_offsets),
                      "result_sha256": self.result_sha256,
                      "settings_sha256": self.settings_sha256, "unblinded": self.unblinded})

    def bound_to(self, result_sha256: str) -> BlindKey:
        """A copy that names the blinded result file it belongs to."""
        return replace(self, result_sha256=result_sha256)


def _hex(f: Fields, key: str, empty: bool = False) -> str:
    v = f.string(key, empty=empty)
    if not (v == "" and empty) and not _HEX64.fullmatch(v):
        raise f.error(key, "64 lowercase hexadecimal digits (a SHA-256)", v)
    return v


def read_key(path) -> BlindKey:
    """Read and check a key file.

    Raises
    ------
    InputFileError
        One line "PATH: FIELD: EXPECTED" (missing file, bad JSON, wrong format, a missing,
        unknown or bad field).
    """
    check_regular_file(path, "a blinding key (JSON) file")
    try:
        d = json.loads(Path(path).read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputFileError(path, "file", f"expected a readable file ({exc.strerror})") \
            from None
    except UnicodeDecodeError:
        raise InputFileError(path, "file", "expected UTF-8 text") from None
    except json.JSONDecodeError as exc:
        raise InputFileError(path, "JSON", f"expected valid JSON ({exc.msg} at line "
                                           f"{exc.lineno})") from None
    f = Fields(path, d)
    check_depth(d, path)
    if d.get("fringe_format") != KEY_FORMAT:
        raise f.error("fringe_format", f"{KEY_FORMAT!r} (the key of a blinded fit)",
                      d.get("fringe_format"))
    if d.get("fringe_format_version") != 1 or isinstance(d.get("fringe_format_version"), bool):
        raise f.error("fringe_format_version", "1", d.get("fringe_format_version"))
    f.unknown(_KEYS)
    off = f.sub("offsets")
    offsets = {k: off.number(k) for k, _ in off.items()}
    if not offsets:
        raise f.error("offsets", "at least one coefficient's offset", {})
    unblinded = None
    u = f.sub("unblinded", required=False)
    if u is not None:
        u.unknown(("utc", "settings_sha256", "result_sha256"))
        unblinded = {"utc": u.string("utc"), "settings_sha256": _hex(u, "settings_sha256"),
                     "result_sha256": _hex(u, "result_sha256")}
    key_id = f.string("key_id")
    if not re.fullmatch(r"[0-9a-f]{8,64}", key_id):
        raise f.error("key_id", "8 to 64 lowercase hexadecimal digits", key_id)
    return BlindKey(key_id, f.string("created_utc"),
                    f.number("spread_sigmas", positive=True), offsets,
                    f.numbers("harmonic_offsets", length=len(HARMONIC_NAMES)),
                    _hex(f, "result_sha256", empty=True), _hex(f, "settings_sha256"),
                    unblinded)


def write_key(path, key: BlindKey, *, overwrite: bool = False, protect=()) -> Path:
    """Write the key file whole or not at all, mode 0600; refuse an existing file unless asked.

    ``overwrite``: replace an existing key (the CLI's ``--overwrite``; ``fringe unblind``
    rewrites the key it used, with its ``unblinded`` record).
    """
    from fringe.io.atomic import write_atomic

    text = json.dumps(key.to_dict(), indent=2) + "\n"

    def _w(tmp):
        os.chmod(tmp, 0o600)            # before any secret is written
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)

    return write_atomic(path, _w, overwrite=overwrite, protect=protect)
