"""Where a campaign comes from: a folder, a .zip, or uploaded files; and safe unzipping.

Zip safety (also used for the app's uploads): an archive is refused when an entry has an
absolute path or a '..' part, is a symbolic link or is encrypted, when it has more than
:data:`MAX_ZIP_ENTRIES` entries, when its files add up to more than :data:`MAX_UNCOMPRESSED_BYTES`
uncompressed, or when it inflates more than :data:`MAX_COMPRESSION_RATIO` times (a "zip bomb";
the ratio is only judged above :data:`RATIO_FLOOR_BYTES`, since tiny files of repeated text can
legitimately compress very well). Common practice for untrusted archives, no single source.
"""
from __future__ import annotations

import io
import stat
import zipfile
from pathlib import Path, PurePosixPath

from screenlab.errors import Problem, ValidationError

MAX_ZIP_ENTRIES = 200
MAX_UNCOMPRESSED_BYTES = 200 * 1024 * 1024
MAX_COMPRESSION_RATIO = 100.0
RATIO_FLOOR_BYTES = 1024 * 1024

#: the tables of a campaign, by base name (each .csv or .xlsx)
TABLES = ("catalysts", "plates", "layout", "readings")
MANIFEST = "campaign.toml"
#: the folder of plate grids that may take the place of readings.csv (one .csv or .xlsx per plate)
READINGS_DIR = "readings"
_GRID_EXTENSIONS = (".csv", ".xlsx")


def _is_grid_file(name: str) -> bool:
    low = name.lower()
    return low.endswith(_GRID_EXTENSIONS) and not low.startswith((".", "~$"))  # no hidden or Office lock files
_IGNORED_PREFIXES = ("__macosx/",)
_IGNORED_NAMES = (".ds_store", "thumbs.db", "desktop.ini")


def _fail(label: str, message: str) -> ValidationError:
    return ValidationError([Problem(label, None, None, None, message)], source=label)


def extract_zip(data: bytes | str | Path, label: str = "archive.zip") -> dict[str, bytes]:
    """Unpack a zip safely into ``{relative posix path: bytes}`` (directories and OS clutter dropped).

    Raises :class:`ValidationError` naming ``label`` on any safety rule above or a corrupt archive.
    """
    try:
        zf = zipfile.ZipFile(io.BytesIO(data) if isinstance(data, (bytes, bytearray)) else Path(data))
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise _fail(label, f"is not a readable zip archive ({exc})") from None
    with zf:
        infos = zf.infolist()
        if len(infos) > MAX_ZIP_ENTRIES:
            raise _fail(label, f"has {len(infos)} entries; at most {MAX_ZIP_ENTRIES} are accepted")
        problems: list[Problem] = []
        total = 0
        packed = 0
        for info in infos:  # entries of one archive (<= 200), not readings
            name = info.filename.replace("\\", "/")
            parts = PurePosixPath(name).parts
            if name.startswith("/") or (len(name) > 1 and name[1] == ":") or ".." in parts:
                problems.append(Problem(label, None, None, info.filename,
                                        "entry with an absolute path or '..' refused (it could write outside the folder)"))
            if stat.S_ISLNK(info.external_attr >> 16):
                problems.append(Problem(label, None, None, info.filename, "symbolic link entries are refused"))
            if info.flag_bits & 0x1:
                problems.append(Problem(label, None, None, info.filename, "encrypted entries are not supported"))
            total += info.file_size
            packed += info.compress_size
        if total > MAX_UNCOMPRESSED_BYTES:
            problems.append(Problem(label, None, None, None,
                                    f"unpacks to {total / 2**20:.0f} MB; at most {MAX_UNCOMPRESSED_BYTES // 2**20} MB "
                                    "are accepted"))
        elif total > RATIO_FLOOR_BYTES and total > MAX_COMPRESSION_RATIO * max(packed, 1):
            problems.append(Problem(label, None, None, None,
                                    f"inflates {total / max(packed, 1):.0f} times; archives compressed more than "
                                    f"{MAX_COMPRESSION_RATIO:.0f} times are refused"))
        if problems:
            raise ValidationError(problems, source=label)
        out: dict[str, bytes] = {}
        read_total = 0
        for info in infos:
            name = info.filename.replace("\\", "/")
            low = name.lower()
            if info.is_dir() or low.startswith(_IGNORED_PREFIXES) or PurePosixPath(low).name in _IGNORED_NAMES:
                continue
            try:
                with zf.open(info) as fh:
                    content = fh.read(MAX_UNCOMPRESSED_BYTES - read_total + 1)
            except (zipfile.BadZipFile, OSError, RuntimeError, ValueError, NotImplementedError) as exc:
                raise _fail(label, f"entry {info.filename!r} cannot be unpacked ({exc})") from None
            read_total += len(content)
            if read_total > MAX_UNCOMPRESSED_BYTES:
                raise _fail(label, f"unpacks to more than {MAX_UNCOMPRESSED_BYTES // 2**20} MB")
            out[name] = content
    return out


def _campaign_level(files: dict[str, bytes]) -> dict[str, bytes]:
    """The files of a campaign folder's own level (base names) and of its readings/ folder
    (``readings/<name>``, grid files only)."""
    out = {k: v for k, v in files.items() if "/" not in k}
    for k, v in files.items():
        parts = k.split("/")
        if len(parts) == 2 and parts[0].lower() == READINGS_DIR and _is_grid_file(parts[1]):
            out[f"{READINGS_DIR}/{parts[1]}"] = v
    return out


def _strip_top_folder(files: dict[str, bytes]) -> dict[str, bytes]:
    """Files at the top level, or inside one common top-level folder, keyed by base name (and the
    grid files of its readings/ folder as ``readings/<name>``)."""
    top = {k: v for k, v in files.items() if "/" not in k}
    if any(k.lower() == MANIFEST for k in top):
        return _campaign_level(files)
    heads = {k.split("/", 1)[0] for k in files if "/" in k}
    if len(heads) == 1:
        head = heads.pop()
        if head.lower() != READINGS_DIR:  # one folder holding the campaign
            inner = {k.split("/", 1)[1]: v for k, v in files.items() if k.startswith(head + "/")}
            return _campaign_level(inner)
    return _campaign_level(files)


def campaign_files_from_zip(data: bytes | str | Path, label: str) -> dict[str, bytes]:
    return _strip_top_folder(extract_zip(data, label))


def campaign_files_from_folder(folder: Path) -> dict[str, bytes]:
    """The campaign's own files of a folder (other files are left alone)."""
    wanted = {MANIFEST} | {f"{t}.{ext}" for t in TABLES for ext in ("csv", "xlsx")}
    out: dict[str, bytes] = {}
    for p in sorted(folder.iterdir()):
        if p.name.lower() in wanted and p.is_file():
            out[p.name] = p.read_bytes()
        elif p.name.lower() == READINGS_DIR and p.is_dir():  # plate grids, one file per plate
            for g in sorted(p.iterdir()):
                if g.is_file() and _is_grid_file(g.name):
                    out[f"{READINGS_DIR}/{g.name}"] = g.read_bytes()
    return out


def campaign_files_from_upload(files: dict[str, bytes], label: str = "upload") -> dict[str, bytes]:
    """What an uploader gives: either one .zip, or the separate files (names may carry folders)."""
    if not isinstance(files, dict) or not all(isinstance(k, str) and isinstance(v, (bytes, bytearray))
                                                for k, v in files.items()):
        raise _fail(label, "uploaded files must be given as a mapping of file name to bytes")
    zips = [k for k in files if k.lower().endswith(".zip")]
    if zips:
        if len(files) > 1:
            raise _fail(label, "upload either one .zip of the campaign folder or its separate files, not both")
        return campaign_files_from_zip(bytes(files[zips[0]]), zips[0])
    flat: dict[str, bytes] = {}
    for k, v in files.items():
        path = PurePosixPath(k.replace("\\", "/"))
        base = path.name
        if len(path.parts) > 1 and path.parts[-2].lower() == READINGS_DIR and _is_grid_file(base):
            base = f"{READINGS_DIR}/{base}"  # a plate grid of the readings/ folder
        if base in flat:
            raise _fail(label, f"two uploaded files are both named {base!r}")
        flat[base] = bytes(v)
    return flat


def _zip_has_campaign(path: Path) -> bool:
    try:
        with zipfile.ZipFile(path) as zf:
            names = [n.replace("\\", "/").lower() for n in zf.namelist()]
    except (zipfile.BadZipFile, OSError):
        return False
    return any(n == MANIFEST or (n.count("/") == 1 and n.endswith("/" + MANIFEST)) for n in names)


def find_campaigns(path) -> list[Path]:
    """Campaigns under ``path``.

    A folder holding campaign.toml is one campaign; otherwise each immediate sub-folder holding one
    and each .zip (top level or one folder deep) holding one, sorted by name. A .zip path is one
    campaign. Raises :class:`ValidationError` when there is none.
    """
    p = Path(path)
    label = str(p)
    if not p.exists():
        raise _fail(label, "does not exist")
    if p.is_file():
        if p.suffix.lower() == ".zip" and _zip_has_campaign(p):
            return [p]
        if p.name.lower() == MANIFEST:
            return [p.parent]
        raise _fail(label, "is neither a campaign folder nor a .zip holding campaign.toml")
    if (p / MANIFEST).is_file():
        return [p]
    found = []
    for child in sorted(p.iterdir(), key=lambda c: c.name):
        if child.is_dir() and (child / MANIFEST).is_file():
            found.append(child)
        elif child.is_file() and child.suffix.lower() == ".zip" and _zip_has_campaign(child):
            found.append(child)
    if not found:
        raise _fail(label, "holds no campaign: no campaign.toml in it, in a sub-folder or in a .zip")
    return found
