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


def _umask() -> int:
    """The process's umask (read without changing it where the system allows)."""
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    old = os.umask(0o022)  # elsewhere: the classic read-by-setting (restored at once)
    os.umask(old)
    return old


def _os_reason(exc: OSError) -> str:
    """An OSError as a short phrase: 'permission denied', 'read-only file system'..."""
    text = exc.strerror or type(exc).__name__
    return text[:1].lower() + text[1:]


def same_file(a: str | os.PathLike, b: str | os.PathLike) -> bool:
    """True when ``a`` and ``b`` name the same file (symlinks and hard links included)."""
    try:
        if os.path.samefile(a, b):
            return True
    except OSError:
        pass
    return os.path.realpath(a) == os.path.realpath(b)


#: files in an input folder that count as inputs (a sheet or plot written into a session folder does not)
INPUT_SUFFIXES = (".wav", ".json", ".toml", ".sofa", ".csv")


def refuse_input_as_output(output: str | os.PathLike | None, inputs, *, option: str) -> None:
    """Refuse an output that resolves to one of the inputs (same file, symlinks included).

    ``inputs`` is an iterable of paths (None entries are skipped); a folder among
    them protects the data files under it (:data:`INPUT_SUFFIXES`: a session's IRs and
    session.json, a folder of loop IRs), not a sheet written there earlier.
    """
    if output is None:
        return
    out_real = os.path.realpath(output)
    for src in inputs:
        if src is None:
            continue
        if same_file(output, src):
            raise InputError(f"is the input file {str(src)!r}; writing it would destroy the input: choose another "
                             "name", key=option, file=None)
        src_real = os.path.realpath(src)
        if os.path.isdir(src_real) and out_real.startswith(src_real.rstrip(os.sep) + os.sep):
            # an existing data file in an input folder (a session's IRs, a folder of loop IRs) is an input
            if os.path.exists(out_real) and Path(out_real).suffix.lower() in INPUT_SUFFIXES:
                raise InputError(f"is inside the input folder {str(src)!r} and would overwrite "
                                 f"{os.path.relpath(out_real, src_real)!r}: choose another name", key=option)


def check_suffix(path: str | os.PathLike, allowed, *, option: str, what: str) -> Path:
    """Refuse an output whose extension does not match what is written (``-o x.mp3`` for a WAV)."""
    p = Path(path)
    allowed = tuple(a.lower() for a in allowed)
    if p.suffix.lower() not in allowed:
        ends = " or ".join(allowed)
        raise InputError(f"writes {what}: the name must end in {ends}, got {str(p)!r}", key=option)
    return p


def check_writable_folder(target: str | os.PathLike, *, option: str | None = None) -> Path:
    """Check before long work that ``target`` can be written: its folder exists, it is not a folder."""
    target = Path(target)
    key = option or str(target)
    if target.is_dir():
        raise InputError(f"{str(target)!r} is a folder; expected a file name", key=key)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(f"folder {str(folder)!r} does not exist", key=key)
    try:  # a real probe: permissions, read-only mounts and pseudo file systems all answer it
        fd, probe = tempfile.mkstemp(prefix=".howl-probe.", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise InputError(f"cannot write in {str(folder)!r}: {_os_reason(exc)}", key=key) from None
    return target


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike, suffix: str | None = None, *, option: str | None = None
                ) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it over ``target`` on success.

    The temporary file keeps the target's suffix (libraries such as soundfile
    and matplotlib pick the format from it). On any exception (Ctrl-C, SIGTERM
    included) it is removed and the target is left as it was. The result gets
    the mode of the file it replaces, or 0666 less the user's umask for a new
    file (as any file a tool writes). An OS error (an unwritable folder, a
    target that is a folder, a full disk) becomes one :class:`InputError`
    naming ``option`` (or the target).
    """
    target = Path(target)
    key = option or str(target)
    folder = target.parent if str(target.parent) else Path(".")
    if target.is_dir():
        raise InputError(f"{str(target)!r} is a folder; expected a file name", key=key)
    if not folder.is_dir():
        raise InputError(f"folder {str(folder)!r} does not exist", key=key)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name[:200]}.", suffix=suffix or target.suffix, dir=folder)
    except OSError as exc:
        raise InputError(f"cannot write in {str(folder)!r}: {_os_reason(exc)}", key=key) from None
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        try:
            mode = os.stat(target).st_mode & 0o7777 if target.exists() else 0o666 & ~_umask()
            os.chmod(tmp_path, mode)
            os.replace(tmp_path, target)
        except OSError as exc:
            raise InputError(f"cannot write {str(target)!r}: {_os_reason(exc)}", key=key) from None
    except BaseException as exc:
        with contextlib.suppress(OSError):
            tmp_path.unlink()
        if isinstance(exc, OSError):  # a writer (soundfile, matplotlib) failing on the disk
            raise InputError(f"cannot write {str(target)!r}: {_os_reason(exc)}", key=key) from None
        raise


@contextlib.contextmanager
def atomic_paths(targets, *, option: str | None = None) -> Iterator[list[Path]]:
    """All or none: temporaries for several targets, renamed over them only when the block succeeds.

    An interruption inside the block leaves every target as it was (no new page 1
    beside an old page 2).
    """
    with contextlib.ExitStack() as stack:
        yield [stack.enter_context(atomic_path(t, option=option)) for t in targets]


def write_text_atomic(target: str | os.PathLike, text: str, *, option: str | None = None) -> None:
    """Write text to ``target`` atomically (UTF-8)."""
    with atomic_path(target, option=option) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_with(target: str | os.PathLike, writer: Callable[[Path], None], *, option: str | None = None) -> None:
    """Call ``writer(tmp_path)`` and move the result over ``target`` atomically."""
    with atomic_path(target, option=option) as tmp:
        writer(tmp)


def write_wav_atomic(target: str | os.PathLike, data: np.ndarray, sample_rate_hz: int, subtype: str = "FLOAT",
                     *, option: str | None = None) -> None:
    """Write a WAV (float32 by default) atomically."""
    import soundfile as sf

    data = np.asarray(data, dtype=np.float32 if subtype == "FLOAT" else np.float64)
    with atomic_path(target, option=option) as tmp:
        sf.write(str(tmp), data, int(sample_rate_hz), subtype=subtype, format="WAV")


def _audio_path(path: str | os.PathLike) -> tuple[Path, str]:
    """The path of a WAV to read, checked: it exists and is not a folder (the first checks of every reader)."""
    p = Path(path)
    name = str(path)
    if not p.exists():
        raise InputError("file not found", file=name)
    if p.is_dir():
        raise InputError("is a folder, expected a WAV file", file=name)
    return p, name


def _not_audio(exc: Exception, name: str) -> InputError:
    """soundfile's own error (LibsndfileError/RuntimeError) as one line naming the file."""
    first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return InputError(f"cannot read as audio ({first}); expected a WAV file", file=name)


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

    p, name = _audio_path(path)
    try:
        data, fs = sf.read(str(p), dtype="float64", always_2d=True)
    except Exception as exc:  # soundfile raises its own LibsndfileError/RuntimeError
        raise _not_audio(exc, name) from None
    n_ch = data.shape[1]
    check_wav_rate(int(fs), file=name)
    if data.shape[0] == 0:
        raise InputError("holds no samples; expected a non-empty WAV", file=name)
    if channel is None:
        if n_ch != 1:
            if not option:  # the caller has no channel option (a session's loop IR): say what is expected
                raise InputError(f"has {n_ch} channels; expected a mono loop IR (one speaker-to-mic loop)", file=name)
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
    warn_if_truncated(p, name)
    return np.ascontiguousarray(x), int(fs)


def warn_if_truncated(path: str | os.PathLike, name: str) -> None:
    """A warning when the WAV's header promises more samples than the file holds."""
    short = wav_shortfall(path)
    if short:
        import warnings

        from howl.errors import HowlWarning

        warnings.warn(f"{name}: the header promises {short[0]} bytes of samples but the file holds {short[1]}: "
                      "the file is truncated (a copy or a recording cut short); only what is there was read",
                      HowlWarning)


#: sample rates accepted from a WAV: below 1 kHz is not audio a PA plays; above 768 kHz no interface records
MIN_WAV_RATE_HZ = 1000
MAX_WAV_RATE_HZ = 768000


def check_wav_rate(fs: int, *, file: str) -> int:
    if not MIN_WAV_RATE_HZ <= fs <= MAX_WAV_RATE_HZ:
        raise InputError(f"sample rate must be in [{MIN_WAV_RATE_HZ}, {MAX_WAV_RATE_HZ}] Hz, got {fs} Hz", file=file)
    return fs


def wav_shortfall(path: str | os.PathLike) -> tuple[int, int] | None:
    """(bytes the RIFF/WAVE ``data`` chunk declares, bytes present) when the file is shorter; else None.

    Reads chunk headers only (RIFF layout: 12-byte file header, then 8-byte chunk
    headers of id + little-endian size, chunks padded to even length).
    """
    try:
        size = os.path.getsize(path)
        with open(path, "rb") as f:
            head = f.read(12)
            if len(head) < 12 or head[:4] != b"RIFF" or head[8:12] != b"WAVE":
                return None
            pos = 12
            for _ in range(64):
                f.seek(pos)
                ch = f.read(8)
                if len(ch) < 8:
                    return None
                n = int.from_bytes(ch[4:8], "little")
                if ch[:4] == b"data":
                    have = size - pos - 8
                    return (n, have) if n != 0xFFFFFFFF and n > have else None
                pos += 8 + n + (n & 1)
    except OSError:
        return None
    return None


def resampled_length(n: int, fs_from: int, fs_to: int, *, file: str, max_s: float = 3600.0) -> int:
    """The length after resampling, refused (before any work) when it would pass ``max_s`` seconds."""
    n_out = int(math.ceil(n * fs_to / fs_from))
    if n_out > max_s * fs_to:
        raise InputError(f"holds {n / fs_from:.0f} s at {fs_from} Hz; resampled to {fs_to} Hz that is more than the "
                         f"{max_s:g} s howl handles: cut it shorter", file=file)
    return n_out


def wav_blocks(path: str | os.PathLike, *, channels: list[int] | None = None, option: str = "--channel",
               blocksize: int = 1 << 16) -> tuple[int, int, Iterator[np.ndarray]]:
    """Read a WAV a block at a time, as float64: (sample_rate_hz, n_frames, blocks).

    The same checks and messages as :func:`read_wav` (missing file, folder, not audio, empty,
    a multichannel file without ``channels``, NaN or infinite samples), so a long recording is
    never held whole. ``channels``: 1-based channels to take (default: the only one); each
    block is (len(channels), n) (one row for a mono file).
    """
    import soundfile as sf

    p, name = _audio_path(path)
    try:
        info = sf.info(str(p))
    except Exception as exc:  # soundfile raises its own LibsndfileError/RuntimeError
        raise _not_audio(exc, name) from None
    n_ch = info.channels
    if info.frames == 0:
        raise InputError("holds no samples; expected a non-empty WAV", file=name)
    check_wav_rate(int(info.samplerate), file=name)
    warn_if_truncated(p, name)
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


#: the largest JSON file read (a howl report or session is far smaller)
MAX_JSON_BYTES = 64_000_000


def read_json_file(path: str | os.PathLike, *, option: str | None = None) -> Any:
    """Parse a JSON file; a missing, huge, non-UTF-8, malformed or absurdly nested file is one
    :class:`InputError` naming the file (and ``option``). A UTF-8 byte-order mark is accepted."""
    p = Path(path)
    size = p.stat().st_size if p.is_file() else 0
    if size > MAX_JSON_BYTES:
        raise InputError(f"is {size / 1e6:.0f} MB; expected a JSON written by howl (under "
                         f"{MAX_JSON_BYTES // 1_000_000} MB)", key=option, file=str(path))
    try:
        return json.loads(p.read_text(encoding="utf-8-sig"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:  # JSONDecodeError is a ValueError
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise InputError(f"cannot be read as JSON ({reason[:200]})", key=option, file=str(path)) from None
    except RecursionError:
        raise InputError("cannot be read as JSON (nested too deeply)", key=option, file=str(path)) from None


def dumps_json(obj: Any) -> str:
    """One JSON object as text (strict: no NaN)."""
    return json.dumps(to_jsonable(obj), indent=2, allow_nan=False)
