"""equiscan from Python: SO(3)-equivariant local descriptors of 3D scans.

The work is done by the equiscan Rust library (``equiscan._native``); every call releases
the GIL while it runs, so threads of a Python program (and Dask workers with several
threads) run in parallel. Errors are :mod:`equiscan.errors` exceptions carrying the
library's one-line message and its kind.

- :func:`features`: descriptors of an ``(n, 3)`` array, the columns and values of
  ``equiscan features`` (NPY layout);
- :func:`read`: a LAS, LAZ, PLY or E57 file as arrays, with its attributes and header summary;
- :func:`write`: an array (and attributes) as a LAS, LAZ or PLY file;
- :func:`align`: registration of two scan files, the report of ``equiscan align --json``;
- :mod:`equiscan.dask`: ``extract`` runs ``equiscan batch``'s tiles on a Dask cluster.
"""

import json
import os
from dataclasses import dataclass, field

import numpy as np

from . import _native
from .errors import Error, InputError, InternalError, IoError, RecipeError

__version__ = _native.__version__

#: Default maximum degree L of the spherical harmonics (the CLI's ``--degree``).
DEFAULT_DEGREE = _native.DEFAULT_DEGREE
#: Default number of radial shells N (the CLI's ``--shells``).
DEFAULT_SHELLS = _native.DEFAULT_SHELLS
#: Descriptor version computed by default (the CLI's ``--descriptor-version``).
DESCRIPTOR_VERSION = _native.DESCRIPTOR_VERSION


@dataclass
class Scan:
    """A point-cloud file read by :func:`read`.

    ``points``: ``(n, 3)`` float64, file coordinates. ``local``: ``(n, 3)`` float32 offsets
    from ``origin`` (the cloud the library computes on: ``points`` = ``origin`` + ``local``).
    ``origin``: three floats, file units. ``attributes``: the attributes the file carries, by
    name: ``intensity`` (float32), ``color`` (``(n, 3)`` uint16, red/green/blue as stored),
    ``normals`` (``(n, 3)`` float32), ``classification`` and ``return_number`` (uint8),
    ``gps_time`` (float64). ``info``: the header summary, the fields of ``equiscan info
    --json`` (format, version, point count, CRS, scale, offset, ...).
    """

    points: np.ndarray
    local: np.ndarray
    origin: tuple
    attributes: dict = field(default_factory=dict)
    info: dict = field(default_factory=dict)

    @property
    def path(self):
        """The file as named when read."""
        return self.info.get("path")

    def __len__(self):
        return len(self.points)


def read(path):
    """Reads a LAS, LAZ, PLY or E57 file (the reader is chosen by the file's content).

    Returns a :class:`Scan`. Raises :class:`~equiscan.errors.InputError` for a corrupt,
    truncated or unsupported file and :class:`~equiscan.errors.IoError` for a missing or
    unreadable one.
    """
    d = _native.read(os.fspath(path))
    return Scan(
        points=d["points"],
        local=d["local"],
        origin=tuple(d["origin"]),
        attributes=dict(d["attributes"]),
        info=json.loads(d["info_json"]),
    )


def _radii(radius):
    if radius is None:
        return None
    if isinstance(radius, (int, float, np.floating, np.integer)):
        return [float(radius)]
    return [float(r) for r in radius]


def features(
    points,
    radius=None,
    degree=DEFAULT_DEGREE,
    shells=DEFAULT_SHELLS,
    *,
    origin=None,
    descriptor_version=DESCRIPTOR_VERSION,
    max_neighbours=None,
    invariants="norms,power",
    keep_coefficients=False,
    voxel=None,
    threads=None,
):
    """Rotation-invariant descriptors at every point (or one point per voxel).

    ``points``: an ``(n, 3)`` numpy array, or a :class:`Scan` from :func:`read`.

    - float64: file coordinates. They are computed on as float32 offsets from ``origin``
      (default: the centre of the bounding box rounded to whole units).
    - float32: offsets from ``origin`` (default ``(0, 0, 0)``), taken as they are.
    - a :class:`Scan`: its ``local`` offsets and ``origin``, so the values are those
      ``equiscan features`` writes for the file, bit for bit.

    ``radius``: support radius in file units, or a list of radii (several scales); left out,
    5 x the measured point spacing rounded to two significant digits, as the CLI chooses it
    (the column names carry the radius used). ``degree`` (L, at most 12), ``shells`` (N),
    ``descriptor_version`` (1 or 2), ``max_neighbours`` (K), ``invariants`` (comma list of
    ``norms``, ``power``, ``bispectrum``), ``keep_coefficients`` and ``voxel`` (centres: one
    point per voxel of this size) mean what the CLI's options of the same names mean.
    ``threads``: worker threads for this call (default: every core). The run is not
    estimated or refused first, as the CLI does without ``--force``: size the call yourself.

    Returns ``(values, columns)``: a float32 ``(rows, len(columns))`` array and the column
    names of an NPY feature file: ``x_local y_local z_local`` (the centre, offset from the
    origin), per scale ``r{R}_count`` and ``r{R}_flags``, the invariants, then the
    coefficients when kept. The same recipe gives the same bytes whatever the thread count.
    """
    if isinstance(points, Scan):
        if origin is not None:
            raise RecipeError(
                "origin= with a Scan: the scan has its own origin; "
                "give scan.points with origin=, or the Scan alone",
                "recipe",
            )
        points, origin = points.local, points.origin
    return _native.features(
        points,
        origin=None if origin is None else tuple(float(v) for v in origin),
        radius=_radii(radius),
        degree=degree,
        shells=shells,
        descriptor_version=descriptor_version,
        max_neighbours=max_neighbours,
        invariants=invariants,
        keep_coefficients=keep_coefficients,
        voxel=voxel,
        threads=threads,
    )


_ATTRIBUTES = {
    "intensity": (np.float32, 1),
    "color": (np.uint16, 2),
    "normals": (np.float32, 2),
    "classification": (np.uint8, 1),
    "return_number": (np.uint8, 1),
    "gps_time": (np.float64, 1),
}


def write(path, points, *, origin=None, attributes=None):
    """Writes a point cloud as LAS 1.4 (``.las``), LAZ (``.laz``) or binary PLY (``.ply``).

    ``points``: an ``(n, 3)`` array as for :func:`features` (float64 file coordinates, or
    float32 offsets from ``origin``), or a :class:`Scan` (its attributes are written too).
    ``attributes``: arrays by the names of :attr:`Scan.attributes` (``intensity``, ``color``,
    ``normals``, ``classification``, ``return_number``, ``gps_time``), one entry per point.
    The file is written under a temporary name and renamed when complete.
    """
    if isinstance(points, Scan):
        attributes = {**points.attributes, **(attributes or {})}
        points, origin = points.local, points.origin
    given = {}
    for name, values in (attributes or {}).items():
        if name not in _ATTRIBUTES:
            raise RecipeError(
                f"attributes: {name!r} is not an attribute equiscan writes; "
                f"give some of {', '.join(_ATTRIBUTES)}",
                "recipe",
            )
        dtype, ndim = _ATTRIBUTES[name]
        a = np.ascontiguousarray(values, dtype=dtype)
        if a.ndim != ndim or (ndim == 2 and a.shape[1] != 3):
            raise RecipeError(
                f"attributes: {name} has shape {a.shape}; "
                f"give {'(n,)' if ndim == 1 else '(n, 3)'} values, one per point",
                "recipe",
            )
        given[name] = a
    _native.write(
        os.fspath(path),
        points,
        origin=None if origin is None else tuple(float(v) for v in origin),
        **given,
    )


def _path_of(scan, name):
    if isinstance(scan, Scan):
        if scan.path is None:
            raise RecipeError(f"{name}: the scan has no file", "recipe")
        return scan.path
    try:
        return os.fspath(scan)
    except TypeError:
        raise RecipeError(
            f"{name}: expected a file path or a Scan read from a file, got {type(scan).__name__}; "
            "give the path of a LAS, LAZ, PLY or E57 file",
            "recipe",
        ) from None


def align(
    source,
    target,
    *,
    method="equivariant",
    voxel=None,
    radius=None,
    seed=1,
    descriptor_version=_native.ALIGN_DESCRIPTOR_VERSION,
    units=None,
    truth=None,
    truth_key=None,
    threads=None,
):
    """Registers ``source`` onto ``target`` with no initial guess.

    ``source``, ``target``: paths of LAS, LAZ or PLY files (or :class:`Scan` objects read
    from files). Options as ``equiscan align``: ``method`` (``"equivariant"`` or
    ``"fpfh"``), ``voxel``, ``radius`` (file units; default from the point spacing),
    ``seed``, ``descriptor_version`` (1 by default for registration), ``units`` (``"m"``,
    ``"mm"``, ``"ft"``, ``"us-ft"``; default from a LAS CRS), ``truth`` and ``truth_key``
    (a JSON file with the true transform, adding the errors against it), ``threads``.

    Returns the report as a dict, the fields of ``equiscan align --json``: ``verdict``
    (``confident``, ``ambiguous``, ``not_found``), ``transform`` (4 x 4, row-major, SOURCE
    into TARGET's frame, file coordinates), ``fit``, ``candidates``, ``constraint``,
    ``settings``, ``scans``, ``caution``... A result that is not ``confident`` is returned,
    not raised: check ``report["verdict"]`` before using the transform. Results support,
    and do not replace, the judgement of a qualified person and the rules that apply.
    """
    text = _native.align(
        _path_of(source, "source"),
        _path_of(target, "target"),
        method=method,
        voxel=voxel,
        radius=radius,
        seed=seed,
        descriptor_version=descriptor_version,
        units=units,
        truth=None if truth is None else os.fspath(truth),
        truth_key=truth_key,
        threads=threads,
    )
    return json.loads(text)


__all__ = [
    "Scan",
    "read",
    "features",
    "align",
    "write",
    "Error",
    "InputError",
    "IoError",
    "RecipeError",
    "InternalError",
    "DEFAULT_DEGREE",
    "DEFAULT_SHELLS",
    "DESCRIPTOR_VERSION",
]
