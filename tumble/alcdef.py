"""ALCDEF: the Asteroid Lightcurve Data Exchange Format (reader and writer).

The format, as described in the standard's published keyword description
(Warner, Stephens & Harris 2011, "Save the Lightcurves", Minor Planet Bulletin
38, 172, and the ALCDEF Standard definition document; from memory):

- a file holds one or more light-curve *blocks*, possibly of several objects;
- each block is ``STARTMETADATA``, ``KEYWORD=value`` lines, ``ENDMETADATA``,
  then ``DATA=JD|MAG|MAGERR[|AIRMASS]`` lines (fields separated by the
  character named by ``DELIMITER``: ``PIPE`` or ``TAB``), then ``ENDDATA``;
- ``OBJECTNUMBER``, ``OBJECTNAME``, ``MPCDESIG`` identify the object;
  ``MAGBAND`` is the band of the magnitudes (``FILTER`` the filter used);
  ``DIFFERMAGS=TRUE`` marks differential magnitudes; ``PHASE`` is the block's
  solar phase angle in degrees; ``LTCAPP`` (``NONE``, ``AVERAGE``, ``POINT``)
  says whether the times are light-time corrected; ``REDUCEDMAGS`` (same values)
  whether the magnitudes are reduced to unit distances; the JD is the
  mid-exposure time in UTC.

Each block becomes one session (its own zero-point: differential blocks use
different comparison stars). Block metadata map to our columns: ``object``,
``band``, ``session``, ``phase_deg`` (when every block gives PHASE).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from tumble.exceptions import PhotometryError

__all__ = ["AlcdefBlock", "parse_alcdef", "looks_like_alcdef", "read_alcdef", "format_alcdef"]

#: Field separators by the DELIMITER keyword's value (ALCDEF standard).
DELIMITERS = {"PIPE": "|", "TAB": "\t"}
#: Values of LTCAPP/REDUCEDMAGS that mean "applied" (ALCDEF standard: NONE, AVERAGE, POINT).
APPLIED = ("AVERAGE", "POINT")
#: A phase angle of -99 (or below) is the standard's "unknown" sentinel (common practice in the format).
MISSING_NUMBER = -99.0


@dataclass(frozen=True)
class AlcdefBlock:
    """One light-curve block of an ALCDEF file.

    Attributes
    ----------
    metadata : dict of str -> str
        Keyword -> value, keywords upper case (first occurrence kept).
    jd : numpy.ndarray, shape (n,)
        Times, JD (UTC, mid-exposure).
    mag, mag_err : numpy.ndarray, shape (n,)
        Magnitudes and their errors, mag (errors may be 0: unknown).
    line : int
        Line number (1-based) of the block's STARTMETADATA.
    data_lines : list of int
        Line number of each data point.
    """

    metadata: dict
    jd: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    line: int
    data_lines: list = field(default_factory=list)

    @property
    def object_id(self) -> str:
        """``NUMBER NAME``, else the name, else the provisional designation."""
        md = self.metadata
        number = md.get("OBJECTNUMBER", "").strip()
        name = md.get("OBJECTNAME", "").strip()
        desig = md.get("MPCDESIG", "").strip()
        if number and number not in ("0", "-99"):
            return f"{number} {name}".strip()
        return name or desig or "unnamed"


def looks_like_alcdef(text_head: str) -> bool:
    """True when the first non-blank line is ``STARTMETADATA`` (the format's block opener)."""
    for line in text_head.splitlines():
        if line.strip():
            return line.strip().upper() == "STARTMETADATA"
    return False


def _number(src: str, where: str, text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise PhotometryError(f"{src}: {where}: '{text.strip()[:40]}' is not a number") from None


def parse_alcdef(text: str, src: str = "<alcdef>") -> list[AlcdefBlock]:
    """Parse ALCDEF text into its blocks.

    Raises
    ------
    PhotometryError
        On a line outside a block, a DATA line before ENDMETADATA, a block not
        closed by ENDDATA, an unknown DELIMITER, or a DATA field that is not a number.
    """
    blocks: list[AlcdefBlock] = []
    state = "outside"
    md: dict = {}
    rows: list = []
    lines_of_rows: list = []
    start = 0
    sep = "|"
    for i, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line:
            continue
        key, _, value = line.partition("=")
        key = key.strip().upper()
        if state == "outside":
            if key != "STARTMETADATA":
                raise PhotometryError(f"{src}: line {i}: '{line[:40]}' outside a block (expected STARTMETADATA)")
            state, md, rows, lines_of_rows, start = "metadata", {}, [], [], i
        elif state == "metadata":
            if key == "ENDMETADATA":
                delim = md.get("DELIMITER", "PIPE").strip().upper()
                if delim not in DELIMITERS:
                    raise PhotometryError(f"{src}: line {i}: DELIMITER={delim} is not one of "
                                          f"{', '.join(DELIMITERS)}")
                sep = DELIMITERS[delim]
                state = "data"
            elif key == "DATA":
                raise PhotometryError(f"{src}: line {i}: DATA line before ENDMETADATA")
            else:
                md.setdefault(key, value.strip())
        else:  # data
            if key == "ENDDATA":
                arr = np.array(rows, dtype=float).reshape(-1, 3)
                blocks.append(AlcdefBlock(md, arr[:, 0], arr[:, 1], arr[:, 2], start, lines_of_rows))
                state = "outside"
            elif key == "DATA":
                fields = value.split(sep)
                if len(fields) < 3:
                    raise PhotometryError(f"{src}: line {i}: DATA has {len(fields)} field(s); "
                                          f"expected JD{sep}MAG{sep}MAGERR")
                rows.append([_number(src, f"line {i}, field {k + 1}", f) for k, f in enumerate(fields[:3])])
                lines_of_rows.append(i)
            else:
                raise PhotometryError(f"{src}: line {i}: '{line[:40]}' inside the data (expected DATA= or ENDDATA)")
    if state != "outside":
        raise PhotometryError(f"{src}: block starting at line {start} is not closed "
                              f"({'ENDMETADATA' if state == 'metadata' else 'ENDDATA'} missing)")
    if not blocks:
        raise PhotometryError(f"{src}: no ALCDEF blocks")
    return blocks


def _applied(blocks, key: str, src: str, obj_blocks) -> dict[str, bool]:
    """Per object: True when every block applied ``key``, False when none did; mixed is an error."""
    out = {}
    for obj, idx in obj_blocks.items():
        values = {blocks[k].metadata.get(key, "NONE").strip().upper() in APPLIED for k in idx}
        if len(values) > 1:
            raise PhotometryError(f"{src}: object {obj}: {key} is applied in some blocks and not in others; "
                                  "split the file or make them agree")
        out[obj] = values.pop()
    return out


def read_alcdef(text: str, src: str):
    """ALCDEF text -> raw columns (time, mag, err, session, band, object[, phase_deg]) and file metadata.

    Returns
    -------
    tumble.photometry._RawTable
        One row per DATA line; ``session`` is the block's ``LCBLOCKID`` (or its
        ordinal); ``meta['LTCORR']`` is true when every block has light-time
        corrected times; the blocks' keywords are kept in ``meta['alcdef_blocks']``.
    """
    from tumble.photometry import _RawTable

    blocks = parse_alcdef(text, src)
    n = [len(b.jd) for b in blocks]
    obj_blocks: dict[str, list[int]] = {}
    for k, b in enumerate(blocks):
        obj_blocks.setdefault(b.object_id, []).append(k)
    lt = _applied(blocks, "LTCAPP", src, obj_blocks)
    reduced = _applied(blocks, "REDUCEDMAGS", src, obj_blocks)
    if any(reduced.values()):
        obj = next(o for o, v in reduced.items() if v)
        raise PhotometryError(f"{src}: object {obj}: magnitudes are reduced to unit distances (REDUCEDMAGS); "
                              "tumble needs the observed magnitudes")
    if len(set(lt.values())) > 1:
        raise PhotometryError(f"{src}: some objects have light-time corrected times and others not (LTCAPP); "
                              "split the file")

    def each(f):
        return np.concatenate([np.full(m, f(b), dtype=object) for b, m in zip(blocks, n)])

    session_ids = [b.metadata.get("LCBLOCKID", "").strip() or f"block{k + 1}" for k, b in enumerate(blocks)]
    if len(set(session_ids)) != len(session_ids):  # repeated ids: number the blocks instead
        session_ids = [f"block{k + 1}" for k in range(len(blocks))]
    columns = {
        "time": np.concatenate([b.jd for b in blocks]),
        "mag": np.concatenate([b.mag for b in blocks]),
        "err": np.concatenate([b.mag_err for b in blocks]),
        "session": np.concatenate([np.full(m, s, dtype=object) for s, m in zip(session_ids, n)]),
        "band": each(lambda b: (b.metadata.get("MAGBAND", "") or b.metadata.get("FILTER", "")).strip()),
        "object": each(lambda b: b.object_id),
    }
    phases = [b.metadata.get("PHASE", "").strip() for b in blocks]
    if all(re.fullmatch(r"[+-]?\d+(\.\d*)?", p) and float(p) > MISSING_NUMBER for p in phases):
        columns["phase_deg"] = np.concatenate([np.full(m, abs(float(p))) for p, m in zip(phases, n)])
    labels = [f"line {i}" for b in blocks for i in b.data_lines]
    meta = {
        "LTCORR": bool(next(iter(lt.values()))),
        "alcdef_blocks": [dict(b.metadata) for b in blocks],
        "TIMESYS": "UTC",
    }
    if len(obj_blocks) == 1:
        meta["OBJECT"] = next(iter(obj_blocks))
    return _RawTable(source=src, names=list(columns), columns=columns, row_labels=labels, meta=meta,
                     format="alcdef")


def format_alcdef(lc, *, contact: str = "", extra: dict | None = None) -> str:
    """A light curve as ALCDEF text: one block per session (sparse points one block per band).

    Parameters
    ----------
    lc : tumble.photometry.LightCurve
    contact : str
        CONTACTNAME value.
    extra : dict, optional
        More metadata keywords for every block.

    Notes
    -----
    Times are written as observed (JD UTC, ``LTCAPP=NONE`` unless the input was
    flagged as corrected); magnitudes as read (``REDUCEDMAGS=NONE``); the phase
    angle of a block is its mean when the light curve knows it.
    """
    out = []
    sessions = np.asarray(lc.session)
    keys = [(int(s), None) for s in np.unique(sessions[sessions >= 0])]
    keys += [(-1, b) for b in np.unique(np.asarray(lc.band)[sessions < 0])]
    lt = "POINT" if str(lc.meta.get("light_time", "")).startswith("input already") else "NONE"
    for s, band in keys:
        sel = (sessions == s) if band is None else ((sessions < 0) & (np.asarray(lc.band) == band))
        idx = np.flatnonzero(sel)
        band_name = str(np.asarray(lc.band)[idx[0]])
        md = {"OBJECTNAME": lc.object_id, "MAGBAND": band_name, "FILTER": band_name,
              "DIFFERMAGS": "FALSE", "LTCAPP": lt, "REDUCEDMAGS": "NONE", "DELIMITER": "PIPE",
              "CONTACTNAME": contact}
        if lc.phase_deg is not None:
            md["PHASE"] = f"{float(np.mean(np.asarray(lc.phase_deg)[idx])):+.2f}"
        md.update(extra or {})
        out.append("STARTMETADATA")
        out.extend(f"{k}={v}" for k, v in md.items())
        out.append("ENDMETADATA")
        out.extend(f"DATA={lc.t_obs[i]:.6f}|{lc.mag[i]:.4f}|{lc.err[i]:.4f}" for i in idx)
        out.append("ENDDATA")
    return "\n".join(out) + "\n"
