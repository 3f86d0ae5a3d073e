"""Checks of a grid file's bytes: truncated netCDF files, and files that are no grid at all.

The netCDF library opens a truncated file without complaint and reads the missing
part as zeros; :func:`check_classic_size` refuses such files before they are
opened. :func:`has_grid_signature` and :func:`first_bytes` let a backend failure be
reported as "this is not a grid" (a CSV given as a grid, say) instead of a parser
error.
"""

from __future__ import annotations

import warnings
from pathlib import Path

from envlink.errors import GridError

__all__ = ["check_classic_size", "has_grid_signature", "first_bytes", "file_format"]


def check_classic_size(path: Path) -> None:
    """Reject a classic netCDF file (CDF-1/CDF-2) shorter than its header says it is.

    The netCDF library opens such a truncated file without complaint and reads the
    missing part as zeros, so the check maps the file (nothing is read) with
    scipy's independent reader of the classic format, which verifies that every
    variable's data lie inside the file.
    """
    try:
        with open(path, "rb") as f:
            magic = f.read(4)
    except OSError as exc:
        raise GridError(f"Cannot read the grid file {str(path)!r}: {exc.strerror or exc}") from None
    if magic == b"\x89HDF":
        _check_hdf5_size(path)
        return
    if magic not in (b"CDF\x01", b"CDF\x02"):
        return
    from scipy.io import netcdf_file

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # scipy: "cannot close ... mmap"
            with netcdf_file(path, "r", mmap=True) as nc:
                for var in nc.variables.values():
                    _ = var.data.shape
    except Exception as exc:  # noqa: BLE001 - any failure means the header and size disagree
        raise GridError(
            f"The netCDF file {str(path)!r} is truncated or corrupt: its header describes more "
            f"data than the file's {path.stat().st_size} bytes hold ({type(exc).__name__})."
        ) from None


def _check_hdf5_size(path: Path) -> None:
    """Compare an HDF5 (netCDF-4) file's size with the end-of-file address in its superblock.

    Superblock layout (HDF5 File Format Specification, version 3.0, §II.A): versions 0
    and 1 hold the end-of-file address as the third address after a fixed 24-byte (v0)
    or 28-byte (v1) preamble; versions 2 and 3 as the third field after 12 bytes.
    """
    with open(path, "rb") as f:
        head = f.read(128)
    if len(head) < 12 or head[:8] != b"\x89HDF\r\n\x1a\n":
        return
    version = head[8]
    if version in (0, 1):
        size_offsets, start = head[13], (24 if version == 0 else 28)
    elif version in (2, 3):
        size_offsets, start = head[9], 12
    else:
        return
    if size_offsets not in (2, 4, 8) or len(head) < start + 3 * size_offsets:
        return
    base = int.from_bytes(head[start : start + size_offsets], "little")
    field = start + 2 * size_offsets  # base address, one more address, then end of file
    eof = int.from_bytes(head[field : field + size_offsets], "little")
    actual = path.stat().st_size
    if base + eof > actual:
        raise GridError(
            f"The netCDF-4/HDF5 file {str(path)!r} is truncated: it holds {actual} bytes but its "
            f"superblock says {base + eof}. Download or copy it again."
        )


#: File signatures of the formats envlink reads: netCDF classic / 64-bit offset /
#: CDF-5 (NetCDF Classic Format Spec.), HDF5 superblock (HDF5 File Format Spec. 2.2),
#: TIFF and BigTIFF byte-order marks (TIFF 6.0, section 2).
_SIGNATURES = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n", b"II*\x00", b"MM\x00*",
               b"II+\x00", b"MM\x00+")


def file_format(path: Path) -> str:
    """The format a file's first bytes announce: ``"netcdf4"`` (HDF5), ``"netcdf3"``
    (classic, 64-bit offset or CDF-5), ``"tiff"`` (TIFF or BigTIFF), ``"zarr"`` (a
    folder with Zarr metadata) or ``""`` (none of these, or unreadable).

    Only these bytes are read, so no reading library is imported to find out: the
    engine that opens the file is then chosen from the answer.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a.nc"
    >>> _ = p.write_bytes(b"CDF\x02" + bytes(28))
    >>> file_format(p), file_format(p.parent)
    ('netcdf3', '')
    """
    if path.is_dir():
        markers = ("zarr.json", ".zgroup", ".zarray", ".zmetadata")
        return "zarr" if any((path / m).exists() for m in markers) else ""
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
            if head.startswith(_SIGNATURES[:3]):
                return "netcdf3"
            if head.startswith(_SIGNATURES[4:]):
                return "tiff"
            for offset in (0, 512, 1024, 2048, 4096):  # HDF5 superblock, maybe after a user block
                fh.seek(offset)
                if fh.read(8) == b"\x89HDF\r\n\x1a\n":
                    return "netcdf4"
    except OSError:
        return ""
    return ""


def has_grid_signature(path: Path) -> bool:
    """True when the file starts like netCDF/HDF5/TIFF (HDF5 may sit after a user block)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
            if head.startswith(_SIGNATURES):
                return True
            for offset in (512, 1024, 2048, 4096):  # HDF5 superblock after a user block
                fh.seek(offset)
                if fh.read(8) == b"\x89HDF\r\n\x1a\n":
                    return True
    except OSError:
        return True  # cannot tell; keep the backend's own reason
    return False


def first_bytes(path: Path) -> str:
    """The first bytes of a file as text, for a message saying what the file is instead."""
    with open(path, "rb") as fh:
        head = fh.read(24)
    text = head.decode("utf-8", errors="replace").replace("\r", " ").replace("\n", " ")
    return text if text.isprintable() else repr(head)
