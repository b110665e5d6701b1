"""Corrupted .npz files are one CaptureError, never a traceback: a flipped byte in
the zip directory can mark a member encrypted (zipfile raises RuntimeError) or give
it an unknown compression method (NotImplementedError). Found by the fuzz test in
tests/test_io_fuzz.py; these are its two failing examples, kept as fixed cases."""

from __future__ import annotations

import numpy as np
import pytest

from fitkit.capture import Capture
from fitkit.errors import CaptureError
from fitkit.io import load_capture, save_npz


@pytest.mark.parametrize("where", [0.962890625, 0.9620516796941567])
def test_flipped_zip_directory_byte_is_a_capture_error(tmp_path, where):
    t = np.arange(50) * 1e-6
    cap = Capture.from_arrays(t, {"a": np.sin(t * 1e5), "b": np.cos(t * 1e5)}, metadata={"k": "v"})
    data = bytearray(save_npz(cap, tmp_path / "seed.npz").read_bytes())
    data[int(where * (len(data) - 1))] = 1
    bad = tmp_path / "bad.npz"
    bad.write_bytes(bytes(data))
    with pytest.raises(CaptureError, match="not a readable .npz file"):
        load_capture(bad)
