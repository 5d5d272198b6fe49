import laspy
import numpy as np
import pytest


@pytest.fixture(scope="session")
def small_las_file(tmp_path_factory):
    """A valid LAS 1.4 file of 2 000 points (format 6)."""
    hdr = laspy.LasHeader(point_format=6, version="1.4")
    hdr.scales, hdr.offsets = np.array([1e-3] * 3), np.zeros(3)
    las = laspy.LasData(hdr)
    rng = np.random.default_rng(5)
    las.x, las.y, las.z = rng.uniform(0, 50, 2000), rng.uniform(0, 50, 2000), rng.uniform(0, 10, 2000)
    path = tmp_path_factory.mktemp("las") / "small.las"
    las.write(path)
    return path
