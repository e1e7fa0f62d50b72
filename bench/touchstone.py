"""Reading stored measurements and writing Touchstone S and Z files (scikit-rf).

A measurement zbench can fit is either a 2-port Touchstone of a calibrated
shunt-through measurement (S-parameters) or a 1-port Touchstone holding the part's
impedance Z (DESIGN §3). Every bad input raises :class:`bench.errors.InputError`
naming the file and the fix. Files are written through
:func:`bench.files.atomic_write_text`, so a reader never sees half a file.

Notes on the format (REFERENCES §6): in version 1.x files Z data is normalised to
the option line's R and scikit-rf reads and writes that correctly; version-1 Y, G
and H files are read wrongly by scikit-rf 2.2, so they are refused here; R is
written as an integer in 1.x files.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import skrf
from numpy.typing import ArrayLike, NDArray
from skrf.io.touchstone import Touchstone

from bench.core.conversions import shunt_through_z
from bench.errors import InputError
from bench.files import atomic_write_text

#: Fewest frequency points a fit or a mount removal can work with.
MIN_POINTS = 10
#: Most frequency points a file may hold: reading costs time and memory in proportion
#: (scikit-rf parses each row in Python), so a longer file is refused before it is read.
MAX_POINTS = 200_001
#: Bytes of a file allowed per point (a 2-port row of full-precision numbers is under 200).
_BYTES_PER_POINT = 256


@dataclass(frozen=True, eq=False)
class Measurement:
    """A stored measurement ready for the core.

    ``kind`` is ``"s2p"`` (2-port S of a shunt-through measurement, ``s`` of shape
    (nf, 2, 2)) or ``"z1p"`` (1-port Z file, ``s`` None). ``z`` (Ω, shape (nf,)) is the
    part's impedance: read from a Z file, or computed from S21 of a 2-port file by the
    shunt-through formula with ``series_r``. ``f`` in Hz, strictly increasing.
    ``z0`` is the reference impedance of the file (Ω).
    """

    path: Path
    f: NDArray[np.float64]
    kind: Literal["s2p", "z1p"]
    s: NDArray[np.complex128] | None
    z: NDArray[np.complex128]
    z0: float
    series_r: float = 0.0
    comments: str = ""

    @property
    def s21(self) -> NDArray[np.complex128] | None:
        """S21 of a 2-port measurement, None for a Z file."""
        return None if self.s is None else self.s[:, 1, 0]


def _read(path: Path) -> tuple[Touchstone, skrf.Network]:
    name = str(path)
    if not path.exists():
        raise InputError(
            "file not found", path=name, hint="check the path; give a .s2p or .s1p file"
        )
    if not path.is_file():
        raise InputError(
            "is a folder, not a measurement file", path=name, hint="give a .s2p or .s1p file"
        )
    _check_size(path)
    try:
        with warnings.catch_warnings():
            # scikit-rf warns (e.g. about frequency order) where we raise our own,
            # clearer errors below; its warnings must not escape as such.
            warnings.simplefilter("ignore")
            touchstone = Touchstone(name)
            network = skrf.Network(name)
    except Exception as exc:  # scikit-rf raises several types for unreadable files
        raise InputError(
            f"not a readable Touchstone file ({type(exc).__name__}: {exc})",
            path=name,
            hint="give a Touchstone file: extension .s1p or .s2p, an option line such as "
            "'# Hz S RI R 50', then one line of numbers per frequency",
        ) from exc
    return touchstone, network


def _check_size(path: Path) -> None:
    """Refuse, before reading it, a file with more than :data:`MAX_POINTS` data rows."""
    size = path.stat().st_size
    if size <= MAX_POINTS * 6:
        return  # too small to hold that many rows
    rows = 0
    with path.open("rb") as stream:
        if size > MAX_POINTS * _BYTES_PER_POINT:
            rows = -1  # too large to read at all
        else:
            rows = sum(1 for line in stream if line.lstrip()[:1] not in (b"!", b"#", b"[", b""))
    if rows < 0 or rows > MAX_POINTS:
        held = f"{size / 1e6:.0f} MB" if rows < 0 else f"{rows} data rows"
        raise InputError(
            f"holds {held}; zbench reads files of at most {MAX_POINTS} frequency points",
            path=str(path),
            hint="export the sweep with fewer points (a log sweep of 801 to 1601 points "
            "resolves every landmark), or keep every n-th row of the file",
        )


def _data_row_frequencies(path: Path, ports: int) -> NDArray[np.float64]:
    """First number of each network-data row (file units) of a 1- or 2-port file."""
    width = 1 + 2 * ports * ports
    out = []
    in_noise = False
    for raw in path.read_text(encoding="latin-1").splitlines():
        line = raw.split("!", 1)[0].strip()
        if not line or line.startswith("#"):
            continue
        if line.startswith("["):
            in_noise = in_noise or line.lower().startswith("[noise data]")
            continue
        tokens = line.split()
        if in_noise or len(tokens) != width:
            continue
        try:
            out.append(float(tokens[0]))
        except ValueError:
            continue
    return np.asarray(out, dtype=float)


def load_measurement(path: str | Path, *, series_r: float = 0.0) -> Measurement:
    """Load a 2-port shunt-through S file or a 1-port Z file for fitting.

    ``series_r`` (Ω, >= 0) is the series resistor at each port of a 2-port
    measurement, used to compute Z from its through-normalised S21; it is ignored for
    Z files (their Z is already the part's). Raises :class:`InputError` for a missing
    file, a file that is not Touchstone, a wrong port count (3 or more ports, or a
    1-port holding S, Y, G or H instead of Z), v1 Y/G/H 2-port data, frequencies not
    strictly increasing, NaN or infinite values, or fewer than :data:`MIN_POINTS` points.
    """
    p = Path(path)
    name = str(p)
    if not (math.isfinite(series_r) and series_r >= 0):
        raise InputError(
            f"series resistance {series_r!r} is not a resistance >= 0 ohms",
            path=name,
            hint="give --series-r as the resistor at each port, e.g. 0 or 499",
        )
    touchstone, network = _read(p)
    ports = network.nports
    parameter = str(getattr(touchstone, "parameter", "s")).lower()
    version = str(getattr(touchstone, "version", "1.0"))
    if ports >= 3:
        raise InputError(
            f"has {ports} ports; zbench reads a 2-port shunt-through measurement or a "
            f"1-port file holding Z",
            path=name,
            hint="export ports 1 and 2 of the shunt-through measurement as a .s2p file",
        )
    if ports == 1 and parameter != "z":
        raise InputError(
            f"is a 1-port file holding {parameter.upper()}, but a 1-port measurement "
            f"must hold the part's impedance Z",
            path=name,
            hint="write the part's impedance as '# Hz Z RI R 50', or give the 2-port "
            "shunt-through .s2p file (a 1-port S11 is a reflection measurement, not this one)",
        )
    if ports == 2 and parameter in ("y", "g", "h") and version.startswith("1"):
        raise InputError(
            f"holds version-1 {parameter.upper()} data, which scikit-rf does not read "
            f"correctly (it scales it by R)",
            path=name,
            hint="export the measurement as S-parameters ('# Hz S RI R 50') or as Touchstone 2.0",
        )
    f = np.asarray(network.f, dtype=float)
    # scikit-rf takes a fall in frequency as the start of noise data and silently
    # stops there, so the frequency order is checked on the file's own data rows.
    listed = _data_row_frequencies(p, ports) * float(getattr(touchstone, "frequency_mult", 1.0))
    if listed.size > f.size:
        f = listed
    if f.size < MIN_POINTS:
        raise InputError(
            f"has {f.size} frequency points; at least {MIN_POINTS} are needed",
            path=name,
            hint="measure or export more points (a log sweep of 201 points or more is usual)",
        )
    steps = np.diff(f)
    if not np.all(steps > 0):
        bad = int(np.argmax(steps <= 0)) + 1
        raise InputError(
            f"frequencies are not strictly increasing (point {bad + 1}: {f[bad]:g} Hz "
            f"after {f[bad - 1]:g} Hz)",
            path=name,
            hint="sort the data by frequency and remove repeated frequencies",
        )
    if f.size != network.f.size:
        raise InputError(
            f"has {f.size} data rows but only {network.f.size} could be read as network data",
            path=name,
            hint="check the file for stray or malformed rows and re-export it",
        )
    s = np.asarray(network.s, dtype=complex)
    if not np.all(np.isfinite(s)):
        rows = np.unique(np.nonzero(~np.isfinite(s.reshape(f.size, -1)))[0])
        listed = ", ".join(f"{f[i]:g} Hz" for i in rows[:3])
        raise InputError(
            f"has NaN or infinite values at {rows.size} frequencies ({listed}"
            f"{', ...' if rows.size > 3 else ''})",
            path=name,
            hint="re-export the measurement, or drop the bad points",
        )
    z0_all = np.asarray(network.z0)
    z0 = float(np.real(z0_all.flat[0]))
    comments = str(getattr(network, "comments", "") or "")
    if ports == 1:
        z = np.asarray(network.z[:, 0, 0], dtype=complex)
        return Measurement(
            path=p, f=f, kind="z1p", s=None, z=z, z0=z0, series_r=0.0, comments=comments
        )
    z = shunt_through_z(s[:, 1, 0], z0, series_r)
    if not np.all(np.isfinite(z)):
        raise InputError(
            "has S21 = 1 at some frequencies, where the shunt-through impedance is infinite",
            path=name,
            hint="check that this is a shunt-through measurement normalised to the through",
        )
    return Measurement(
        path=p, f=f, kind="s2p", s=s, z=z, z0=z0, series_r=float(series_r), comments=comments
    )


def interpolate_to(
    f_target: ArrayLike, f_source: ArrayLike, values: ArrayLike, *, name: str = "mount file"
) -> NDArray[np.complex128]:
    """Interpolate complex ``values`` on ``f_source`` (Hz) onto ``f_target`` (Hz).

    Real and imaginary parts are interpolated linearly in frequency (the mount is
    ``R + jωL``, linear in f). Extrapolation is refused: a target grid that extends beyond
    the source's range (by more than 1e-9 relative) raises :class:`InputError`.
    """
    ft = np.asarray(f_target, dtype=float)
    fs = np.asarray(f_source, dtype=float)
    v = np.asarray(values, dtype=complex)
    if fs.shape != v.shape or fs.ndim != 1 or fs.size < 2:
        raise InputError(
            f"{name}: needs matching 1-D frequency and value arrays of at least 2 points, "
            f"got {fs.shape} and {v.shape}",
            hint="give the same number of frequencies and values",
        )
    if not np.all(np.diff(fs) > 0):
        raise InputError(
            f"{name}: source frequencies are not strictly increasing",
            hint="sort the file by frequency",
        )
    slack = 1e-9 * max(abs(fs[0]), abs(fs[-1]))
    if ft.size and (ft.min() < fs[0] - slack or ft.max() > fs[-1] + slack):
        raise InputError(
            f"{name}: covers {fs[0]:g} Hz to {fs[-1]:g} Hz but the measurement needs "
            f"{ft.min():g} Hz to {ft.max():g} Hz; zbench will not extrapolate a mount",
            hint="capture the mount short over at least the measurement's frequency range",
        )
    ftc = np.clip(ft, fs[0], fs[-1])
    return np.interp(ftc, fs, v.real) + 1j * np.interp(ftc, fs, v.imag)


def _option_r(z0: float) -> str:
    if not (math.isfinite(z0) and z0 > 0 and float(z0).is_integer()):
        raise ValueError(
            f"reference impedance {z0!r} ohm: Touchstone 1.x files need an integer R; "
            f"use an integer reference such as 50"
        )
    return str(int(z0))


def _network(f: ArrayLike, data: NDArray[np.complex128], z0: float, comments: Iterable[str]):
    ff = np.asarray(f, dtype=float)
    if ff.ndim != 1 or data.shape[0] != ff.size:
        raise ValueError(f"frequencies {ff.shape} and data {data.shape} do not match")
    if ff.size >= 2 and not np.all(np.diff(ff) > 0):
        raise ValueError("frequencies must be strictly increasing")
    text = "\n".join(str(c) for c in comments)
    return skrf.Network(
        frequency=skrf.Frequency.from_f(ff, unit="Hz"),
        s=data,
        z0=z0,
        comments=text,
        name="zbench",
    )


def _write(network: skrf.Network, path: str | Path, z0: float, parameter: str) -> Path:
    r_text = _option_r(z0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        text = network.write_touchstone(
            return_string=True, form="ri", r_ref=float(z0), parameter=parameter
        )
    # scikit-rf writes 'R 50.0'; 1.x readers expect an integer there.
    text = re.sub(r"^(#.*\bR\s+)\S+", rf"\g<1>{r_text}", text, count=1, flags=re.MULTILINE)
    return atomic_write_text(path, text)


def write_touchstone_s(
    path: str | Path,
    f: ArrayLike,
    s: ArrayLike,
    z0: float = 50.0,
    comments: Iterable[str] = (),
) -> Path:
    """Write S-parameters ``s`` (shape (nf, n, n) or (nf,) for one port) as Touchstone 1.x.

    ``f`` in Hz, strictly increasing; ``z0`` an integer reference (Ω); each comment
    becomes a ``!`` line. Returns the path written.
    """
    data = np.asarray(s, dtype=complex)
    if data.ndim == 1:
        data = data.reshape(-1, 1, 1)
    return _write(_network(f, data, z0, comments), path, z0, "S")


def write_touchstone_z(
    path: str | Path, f: ArrayLike, z: ArrayLike, comments: Iterable[str] = (), z0: float = 50.0
) -> Path:
    """Write a part's impedance ``z`` (Ω, shape (nf,)) as a 1-port Touchstone 1.x Z file.

    The values are normalised to ``R z0`` in the file as version 1.1 requires
    (``# Hz Z RI R 50``); :func:`load_measurement` reads them back in ohms.
    """
    zz = np.asarray(z, dtype=complex).reshape(-1, 1, 1)
    if not np.all(np.isfinite(zz)):
        raise ValueError("impedance values must be finite to be written")
    s = skrf.network.z2s(zz, z0)
    return _write(_network(f, s, z0, comments), path, z0, "Z")
