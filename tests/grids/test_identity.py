"""grid_identity: content hashes checked against hashlib, stability and sensitivity."""

from __future__ import annotations

import hashlib
import json

import numpy as np

from envlink import grid_identity
from envlink.grids.identity import identity_json


def test_small_file_hash_is_sha256_of_bytes(tmp_path):
    p = tmp_path / "a.nc"
    p.write_bytes(b"some bytes" * 10)
    ident = grid_identity(p, "sst", attrs={"units": "K"})
    # hashlib (Python standard library) as the reference SHA-256 (FIPS 180-4).
    assert ident["files"][0]["sha256"] == hashlib.sha256(b"some bytes" * 10).hexdigest()
    assert ident["files"][0]["size"] == 100
    assert ident["variable"] == "sst" and ident["attrs"] == {"units": "K"}


def test_large_file_sampled_and_full(tmp_path):
    p = tmp_path / "big.bin"
    data = np.random.default_rng(0).integers(0, 256, size=4 * 1024 * 1024, dtype=np.uint8).tobytes()
    p.write_bytes(data)
    sampled = grid_identity(p, "v", attrs={})
    full = grid_identity(p, "v", attrs={}, full_hash=True)
    assert full["files"][0]["sha256"] == hashlib.sha256(data).hexdigest()
    assert sampled["files"][0]["sha256"] != full["files"][0]["sha256"]
    assert sampled["hash"] == "sampled" and full["hash"] == "full"
    # Changing a header byte changes the sampled hash.
    p.write_bytes(b"X" + data[1:])
    assert grid_identity(p, "v", attrs={})["files"][0]["sha256"] != sampled["files"][0]["sha256"]


def test_stable_json_and_key(tmp_path):
    p = tmp_path / "a.bin"
    p.write_bytes(b"abc")
    a = grid_identity(p, "sst", attrs={"scale_factor": np.float32(0.5), "units": "K"})
    b = grid_identity(p, "sst", attrs={"units": "K", "scale_factor": np.float32(0.5)})
    assert identity_json(a) == identity_json(b)
    assert json.loads(identity_json(a))["attrs"]["scale_factor"] == 0.5
    c = grid_identity(p, "sst", attrs={"units": "degC"})
    assert c["key"] != a["key"]


def test_identity_reads_attrs_from_file(tmp_path):
    from grids._writers import simple_grid

    p = simple_grid(tmp_path / "g.nc", np.zeros((1, 1, 1)), lat=np.array([0.0]), lon=np.array([0.0]),
                    time=np.array([0.0]), attrs={"units": "K", "long_name": "sea surface temperature"})
    ident = grid_identity(p, "sst")
    assert ident["attrs"]["long_name"] == "sea surface temperature"
