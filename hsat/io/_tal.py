"""EDF+ time-stamped annotation lists (TALs) and the record time axis.

TAL syntax (EDF+ spec, standards.md §7): ``+onset[\x15duration]\x14text\x14...\x00``;
the first TAL of every data record in the first ``EDF Annotations`` signal keeps time
(its first text is empty) and gives the record's start.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from hsat.errors import UnreadableInput
from hsat.recording import Annotation

#: Tolerance when comparing record start times (seconds).
TIME_TOL_S = 1e-3


def parse_tals(block: bytes) -> list[tuple[float, float, list[str]]]:
    """TALs of one record's annotation bytes: (onset, duration, texts)."""
    out: list[tuple[float, float, list[str]]] = []
    for tal in block.rstrip(b"\x00").split(b"\x00"):
        if not tal:
            continue
        head, *texts = tal.split(b"\x14")
        onset_raw, _, duration_raw = head.partition(b"\x15")
        try:
            onset = float(onset_raw)
            duration = float(duration_raw) if duration_raw else 0.0
        except ValueError:
            continue
        out.append((onset, duration, [t.decode("utf-8", errors="replace") for t in texts]))
    return out


def read_annotations(
    path: Path, blocks: list[np.ndarray], is_plus: bool, n_records: int
) -> tuple[np.ndarray | None, list[Annotation]]:
    """Record start times from time-keeping TALs, and all annotations.

    ``blocks`` are the (n_records, n_bytes) annotation channels in file order; only the
    first carries time-keeping TALs (EDF+ spec, standards.md §7).
    """
    if not is_plus or not blocks:
        return None, []
    anns: list[Annotation] = []
    first = np.ascontiguousarray(blocks[0])
    n_bytes = first.shape[1]
    raw = first.tobytes()
    end14 = np.argmax(first == 0x14, axis=1)
    starts = np.empty(n_records)
    for i, stop in enumerate(end14.tolist()):
        try:
            starts[i] = float(raw[i * n_bytes : i * n_bytes + stop])
        except ValueError:
            raise UnreadableInput(
                path, f"corrupt EDF+ file: data record {i + 1} has no time-keeping annotation"
            ) from None
    # Records holding more than the bare time-keeping TAL ("+t\x14\x14\x00") get a full parse.
    first_nul = np.argmax(first == 0, axis=1)
    later = np.arange(n_bytes)[None, :] > first_nul[:, None]
    busy = ((first != 0) & later).any(axis=1) | ((first == 0x14).sum(axis=1) > 2)
    for i in np.flatnonzero(busy).tolist():
        for j, (onset, duration, texts) in enumerate(
            parse_tals(raw[i * n_bytes : (i + 1) * n_bytes])
        ):
            skip_first = j == 0  # the first text of the first TAL is the empty time-keeper
            for k, text in enumerate(texts):
                if (skip_first and k == 0) or not text:
                    continue
                anns.append(Annotation(onset, duration, text))
    for extra in blocks[1:]:
        flat = np.ascontiguousarray(extra).tobytes()
        width = extra.shape[1]
        for i in range(n_records):
            for onset, duration, texts in parse_tals(flat[i * width : (i + 1) * width]):
                anns.extend(Annotation(onset, duration, t) for t in texts if t)
    return starts, anns


def record_times(
    path: Path,
    tk: np.ndarray | None,
    n_records: int,
    dur: float,
    file_type: str,
    warnings: list[str],
) -> tuple[np.ndarray, float, bool]:
    """Record start times (s), the sub-second start offset, and whether contiguous."""
    regular = np.arange(n_records) * dur
    if tk is None:
        return regular, 0.0, True
    offset = float(tk[0] - math.floor(tk[0]))
    times = tk - offset
    contiguous = bool(np.all(np.abs(times - times[0] - regular) <= TIME_TOL_S))
    if file_type == "EDF+C" and not contiguous:
        warnings.append("EDF+C file whose time-keeping shows gaps: read as discontinuous (EDF+D)")
    steps = np.diff(times)
    bad = np.flatnonzero(steps < dur - TIME_TOL_S)
    if bad.size:
        i = int(bad[0])
        raise UnreadableInput(
            path,
            (
                f"corrupt EDF+ file: data record {i + 2} starts at {times[i + 1]:g} s, before "
                f"record {i + 1} ends ({times[i] + dur:g} s)"
            ),
        )
    return times, offset, contiguous
