"""Orbital elements for many objects: the MPC's orbit export format and plain tables.

``--orbits FILE`` gives every object of a survey its geometry (r, Delta, phase
angle, Sun and observer directions) from two-body elements, offline, through
:func:`tumble.geometry.observing_geometry` - the same route as ``--elements``.

Two formats are read:

- the Minor Planet Center's fixed-column export format of minor-planet orbits
  (the layout of ``MPCORB.DAT``, described in the MPC documentation "Export Format
  for Minor-Planet Orbits", minorplanetcenter.net/iau/info/MPOrbitFormat.html):
  columns 1-7 packed designation, 21-25 packed epoch (0h TT), 27-35 mean anomaly,
  38-46 argument of perihelion, 49-57 node, 60-68 inclination (deg, J2000
  ecliptic), 71-79 eccentricity, 93-103 semi-major axis (au), 167-194 readable
  designation; a preamble ending in a line of dashes is skipped;
- a table (CSV, ECSV, FITS, VOTable, Parquet) with the columns ``object``, ``a_au``,
  ``e``, ``i_deg``, ``node_deg``, ``peri_deg``, ``m_deg``, ``epoch_jd`` (JD TDB;
  aliases below).

Objects are matched by name: "65803", "(65803) Didymos", "65803 Didymos" and
"Didymos" all find the orbit of number 65803; "2005 UD" its provisional designation.
The MPC epoch is in TT; it is used as TDB (they differ by under 2 ms).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from tumble.exceptions import GeometryError
from tumble.geometry import OrbitalElements

__all__ = ["OrbitCatalogue", "read_orbits", "parse_mpc_orbits", "unpack_designation", "unpack_epoch_jd",
           "name_keys", "TABLE_ALIASES"]

#: Plain-table columns (ours -> accepted names, case-insensitive).
TABLE_ALIASES: dict[str, tuple[str, ...]] = {
    "object": ("object", "designation", "name", "object_id", "target"),
    "a_au": ("a_au", "a", "semimajor_axis"),
    "e": ("e", "ecc", "eccentricity"),
    "i_deg": ("i_deg", "i", "incl", "inclination"),
    "node_deg": ("node_deg", "node", "omega_node", "raan"),
    "peri_deg": ("peri_deg", "peri", "argperi", "w"),
    "m_deg": ("m_deg", "m", "mean_anomaly", "ma"),
    "epoch_jd": ("epoch_jd", "epoch", "epoch_tdb"),
}
#: Fixed columns (0-based slices) of the MPC export format (MPC, "Export Format for Minor-Planet Orbits").
MPC_COLUMNS = {
    "designation": slice(0, 7),
    "epoch": slice(20, 25),
    "m_deg": slice(26, 35),
    "peri_deg": slice(37, 46),
    "node_deg": slice(48, 57),
    "i_deg": slice(59, 68),
    "e": slice(70, 79),
    "a_au": slice(92, 103),
    "readable": slice(166, 194),
}
#: Shortest line holding every element (the semi-major axis ends in column 103).
MPC_MIN_LINE = 103
#: Packed century letters (MPC packed dates and designations).
_CENTURY = {"I": 18, "J": 19, "K": 20, "L": 21}
#: Packed values 1..61: 1-9, A-Z (10-35), a-z (36-61) (MPC packed-number digits).
_PACKED_DIGITS = "0123456789ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz"
#: Survey designations as packed (PLS, T1S, T2S, T3S) -> readable suffix (MPC packed designations).
_SURVEYS = {"PLS": "P-L", "T1S": "T-1", "T2S": "T-2", "T3S": "T-3"}


def _digit(ch: str) -> int:
    k = _PACKED_DIGITS.find(ch)
    if k < 0:
        raise ValueError(ch)
    return k


def unpack_designation(packed: str) -> str:
    """An MPC packed designation as its readable form: ``00433`` -> ``433``, ``K05U00D`` -> ``2005 UD``.

    Numbers: five characters, the first a digit or a letter (A = 10 ... z = 61
    ten-thousands), or ``~`` and four base-62 digits (620000 and above).
    Provisional: century letter, two year digits, half-month letter, cycle count
    (two characters), second letter. Survey designations ``PLS2040`` -> ``2040 P-L``.

    Raises
    ------
    ValueError
        On a string that is none of these.
    """
    p = packed.strip()
    if len(p) == 5 and p[0] == "~":
        value = 0
        for ch in p[1:]:
            value = value * 62 + _digit(ch)
        return str(620000 + value)
    if len(p) == 5 and p[1:].isdigit():
        return str(_digit(p[0]) * 10000 + int(p[1:]))
    if len(p) == 7 and p[:3] in _SURVEYS and p[3:].isdigit():
        return f"{int(p[3:])} {_SURVEYS[p[:3]]}"
    if len(p) == 7 and p[0] in _CENTURY and p[1:3].isdigit() and p[3].isalpha() and p[6].isalpha():
        year = _CENTURY[p[0]] * 100 + int(p[1:3])
        cycle = _digit(p[4]) * 10 + int(p[5])
        return f"{year} {p[3]}{p[6]}{cycle if cycle else ''}"
    raise ValueError(f"'{packed}' is not a packed designation")


def _julian_day_number(year: int, month: int, day: int) -> int:
    # Fliegel & Van Flandern (1968), Comm. ACM 11, 657: Gregorian date -> Julian Day Number (integer arithmetic)
    a = -1 if month <= 2 else 0
    return ((1461 * (year + 4800 + a)) // 4 + (367 * (month - 2 - 12 * a)) // 12
            - (3 * ((year + 4900 + a) // 100)) // 4 + day - 32075)


def unpack_epoch_jd(packed: str) -> float:
    """An MPC packed date (``K2456`` = 2024 May 6) as the JD of 0h of that day."""
    p = packed.strip()
    if len(p) != 5 or p[0] not in _CENTURY or not p[1:3].isdigit():
        raise ValueError(f"'{packed}' is not a packed date")
    year = _CENTURY[p[0]] * 100 + int(p[1:3])
    month, day = _digit(p[3]), _digit(p[4])
    if not (1 <= month <= 12 and 1 <= day <= 31):
        raise ValueError(f"'{packed}' is not a packed date")
    return _julian_day_number(year, month, day) - 0.5


def name_keys(name: str) -> list[str]:
    """Normalised keys under which an object name is matched, most specific first.

    ``"(65803) Didymos"`` -> ``["65803 didymos", "65803", "didymos"]``;
    ``"2005 UD"`` -> ``["2005 ud"]``.
    """
    text = " ".join(str(name).replace("(", " ").replace(")", " ").replace("_", " ").split()).lower()
    keys = [text] if text else []
    hit = re.fullmatch(r"(\d+)\s+(.+)", text)
    if hit and not re.fullmatch(r"[a-z]{1,2}\d*", hit.group(2)):  # "2005 ud" is a designation, not number+name
        keys += [hit.group(1), hit.group(2)]
    return keys


@dataclass(frozen=True)
class OrbitCatalogue:
    """Orbital elements of many objects, looked up by name.

    Attributes
    ----------
    source : str
        File read.
    elements : dict of str -> OrbitalElements
        By normalised key (:func:`name_keys`); several keys may share one orbit.
    names : tuple of str
        The objects' names as given in the file, in file order.
    """

    source: str
    elements: dict = field(default_factory=dict)
    names: tuple = ()

    def __len__(self) -> int:
        return len(self.names)

    def lookup(self, object_id: str) -> OrbitalElements | None:
        """The elements of ``object_id`` (matched by :func:`name_keys`), or None when not in the file."""
        for key in name_keys(object_id):
            if key in self.elements:
                return self.elements[key]
        return None


def _add(index: dict, keys: list[str], elements: OrbitalElements) -> None:
    for k in keys:
        index.setdefault(k, elements)


def parse_mpc_orbits(text: str, src: str = "<orbits>") -> OrbitCatalogue:
    """Parse text in the MPC export format (one orbit per line, optional preamble).

    Raises
    ------
    GeometryError
        One line naming the file, the line and the column on a field that cannot be read.
    """
    lines = text.splitlines()
    start = 0
    for k, line in enumerate(lines[:200]):  # MPCORB.DAT: a preamble ends in a line of dashes
        if line.startswith("-----"):
            start = k + 1
            break
    index: dict = {}
    names = []
    for k in range(start, len(lines)):
        line = lines[k]
        if not line.strip():
            continue
        where = f"{src}: line {k + 1}"
        if len(line) < MPC_MIN_LINE:
            raise GeometryError(f"{where}: {len(line)} characters, an MPC orbit line has at least {MPC_MIN_LINE}")
        try:
            desig = unpack_designation(line[MPC_COLUMNS["designation"]])
        except ValueError as exc:
            raise GeometryError(f"{where}, columns 1-7: {exc}") from None
        try:
            epoch = unpack_epoch_jd(line[MPC_COLUMNS["epoch"]])
        except ValueError as exc:
            raise GeometryError(f"{where}, columns 21-25: {exc}") from None
        values = {}
        for name in ("m_deg", "peri_deg", "node_deg", "i_deg", "e", "a_au"):
            sl = MPC_COLUMNS[name]
            try:
                values[name] = float(line[sl])
            except ValueError:
                raise GeometryError(f"{where}, columns {sl.start + 1}-{sl.stop}: '{line[sl].strip()}' "
                                    f"is not a number ({name})") from None
        elements = _elements(where, values, epoch)
        readable = line[MPC_COLUMNS["readable"]].strip() if len(line) > 166 else ""
        names.append(readable or desig)
        _add(index, name_keys(readable) + name_keys(desig), elements)
    if not names:
        raise GeometryError(f"{src}: no orbits")
    return OrbitCatalogue(src, index, tuple(names))


def _elements(where: str, v: dict, epoch: float) -> OrbitalElements:
    try:
        return OrbitalElements(v["a_au"], v["e"], v["i_deg"], v["node_deg"], v["peri_deg"], v["m_deg"], epoch)
    except GeometryError as exc:
        raise GeometryError(f"{where}: {exc}") from None


def _read_table_orbits(path: Path) -> OrbitCatalogue:
    from tumble.photometry import _numeric, read_table

    src = str(path)
    try:
        table = read_table(path)
    except Exception as exc:  # the photometry reader's message, as an orbit-file error
        raise GeometryError(str(exc)) from None
    lower = {n.lower().strip(): n for n in table.names}
    cols = {}
    for ours, aliases in TABLE_ALIASES.items():
        hit = next((lower[a] for a in aliases if a in lower), None)
        if hit is None:
            raise GeometryError(f"{src}: no '{ours}' column (looked for {', '.join(aliases)}; "
                                f"found {', '.join(table.names)})")
        cols[ours] = hit
    try:
        numbers = {ours: _numeric(table, name, allow_missing=False) for ours, name in cols.items() if ours != "object"}
    except Exception as exc:
        raise GeometryError(str(exc)) from None
    index: dict = {}
    names = []
    for k, name in enumerate(table.columns[cols["object"]]):
        name = str(name).strip()
        v = {key: float(arr[k]) for key, arr in numbers.items()}
        elements = _elements(f"{src}: {table.label(k)}", v, v["epoch_jd"])
        names.append(name)
        _add(index, name_keys(name), elements)
    return OrbitCatalogue(src, index, tuple(names))


def _looks_like_mpc(text: str) -> bool:
    body = [ln for ln in text.splitlines()[:300] if ln.strip()]
    dashes = [k for k, ln in enumerate(body) if ln.startswith("-----")]
    first = body[dashes[0] + 1] if dashes and dashes[0] + 1 < len(body) else (body[0] if body else "")
    if len(first) < MPC_MIN_LINE:
        return False
    try:
        unpack_designation(first[MPC_COLUMNS["designation"]])
        unpack_epoch_jd(first[MPC_COLUMNS["epoch"]])
    except ValueError:
        return False
    return True


def read_orbits(path: str | os.PathLike) -> OrbitCatalogue:
    """Read an orbit file: the MPC export format (sniffed from its first orbit line) or a table.

    Raises
    ------
    GeometryError
        One line naming the file (and line or column) and the problem.
    """
    import gzip

    path = Path(path)
    if not path.is_file():
        raise GeometryError(f"{path}: no such orbit file")
    data = path.read_bytes()
    if data[:2] == b"\x1f\x8b":
        try:
            data = gzip.decompress(data)
        except (OSError, EOFError):
            raise GeometryError(f"{path}: truncated or corrupt gzip data") from None
    text = data.decode("latin-1")
    if _looks_like_mpc(text):
        return parse_mpc_orbits(text, str(path))
    return _read_table_orbits(path)
