"""Thin file I/O at the edge: WAV in, atomic writes out, JSON rendering.

Everything written goes to a temporary file in the target's folder first and
is then renamed over the target (``os.replace`` is atomic on POSIX and
Windows), so an interrupted run never leaves a half-written output.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import math
import os
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np

from howl.errors import InputError


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it over ``target`` on success.

    The temporary file keeps the target's suffix (libraries such as soundfile
    and matplotlib pick the format from it). On any exception it is removed and
    the target is left as it was.
    """
    target = Path(target)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(f"folder {str(folder)!r} does not exist", key=str(target))
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=suffix or target.suffix, dir=folder)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def write_text_atomic(target: str | os.PathLike, text: str) -> None:
    """Write text to ``target`` atomically (UTF-8)."""
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_with(target: str | os.PathLike, writer: Callable[[Path], None]) -> None:
    """Call ``writer(tmp_path)`` and move the result over ``target`` atomically."""
    with atomic_path(target) as tmp:
        writer(tmp)


def write_wav_atomic(target: str | os.PathLike, data: np.ndarray, sample_rate_hz: int, subtype: str = "FLOAT") -> None:
    """Write a WAV (float32 by default) atomically."""
    import soundfile as sf

    data = np.asarray(data, dtype=np.float32 if subtype == "FLOAT" else np.float64)
    with atomic_path(target) as tmp:
        sf.write(str(tmp), data, int(sample_rate_hz), subtype=subtype, format="WAV")


def read_wav(path: str | os.PathLike, *, channel: int | None = None, option: str = "--channel") -> tuple[np.ndarray, int]:
    """Read a WAV as float64, mono.

    Parameters
    ----------
    path: the file.
    channel: 1-based channel to take from a multichannel file. A multichannel
        file without ``channel`` is refused with a message that names the
        option, so nobody analyses the wrong mic by accident.

    Returns
    -------
    (samples, sample_rate_hz)
    """
    import soundfile as sf

    p = Path(path)
    name = str(path)
    if not p.exists():
        raise InputError("file not found", file=name)
    if p.is_dir():
        raise InputError("is a folder, expected a WAV file", file=name)
    try:
        data, fs = sf.read(str(p), dtype="float64", always_2d=True)
    except Exception as exc:  # soundfile raises its own LibsndfileError/RuntimeError
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"cannot read as audio ({first}); expected a WAV file", file=name) from None
    n_ch = data.shape[1]
    if data.shape[0] == 0:
        raise InputError("holds no samples; expected a non-empty WAV", file=name)
    if channel is None:
        if n_ch != 1:
            raise InputError(
                f"has {n_ch} channels; pass {option} N (1..{n_ch}) to choose one", file=name
            )
        x = data[:, 0]
    else:
        if not 1 <= channel <= n_ch:
            raise InputError(f"{option} must be in 1..{n_ch}, got {channel}", file=name)
        x = data[:, channel - 1]
    if not np.all(np.isfinite(x)):
        raise InputError("holds NaN or infinite samples", file=name)
    return np.ascontiguousarray(x), int(fs)


def wav_blocks(path: str | os.PathLike, *, channels: list[int] | None = None, option: str = "--channel",
               blocksize: int = 1 << 16) -> tuple[int, int, Iterator[np.ndarray]]:
    """Read a WAV a block at a time, as float64: (sample_rate_hz, n_frames, blocks).

    The same checks and messages as :func:`read_wav` (missing file, folder, not audio, empty,
    a multichannel file without ``channels``, NaN or infinite samples), so a long recording is
    never held whole. ``channels``: 1-based channels to take (default: the only one); each
    block is (len(channels), n) (one row for a mono file).
    """
    import soundfile as sf

    p = Path(path)
    name = str(path)
    if not p.exists():
        raise InputError("file not found", file=name)
    if p.is_dir():
        raise InputError("is a folder, expected a WAV file", file=name)
    try:
        info = sf.info(str(p))
    except Exception as exc:  # soundfile raises its own LibsndfileError/RuntimeError
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"cannot read as audio ({first}); expected a WAV file", file=name) from None
    n_ch = info.channels
    if info.frames == 0:
        raise InputError("holds no samples; expected a non-empty WAV", file=name)
    if channels is None:
        if n_ch != 1:
            raise InputError(f"has {n_ch} channels; pass {option} N (1..{n_ch}) to choose one", file=name)
        channels = [1]
    for c in channels:
        if not 1 <= c <= n_ch:
            raise InputError(f"{option} must be in 1..{n_ch}, got {c}", file=name)
    cols = [c - 1 for c in channels]

    def blocks() -> Iterator[np.ndarray]:
        for b in sf.blocks(str(p), blocksize=blocksize, dtype="float64", always_2d=True):
            x = np.ascontiguousarray(b[:, cols].T)
            if not np.all(np.isfinite(x)):
                raise InputError("holds NaN or infinite samples", file=name)
            yield x

    return int(info.samplerate), int(info.frames), blocks()


def to_jsonable(obj: Any) -> Any:
    """Turn numpy scalars/arrays, dataclasses, tuples and paths into JSON types.

    NaN and infinities become ``null`` (JSON has no such numbers); callers that
    need to say *why* a value is missing add a separate field.
    """
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: to_jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, Path):
        return str(obj)
    return obj


def dumps_json(obj: Any) -> str:
    """One JSON object as text (strict: no NaN)."""
    return json.dumps(to_jsonable(obj), indent=2, allow_nan=False)
