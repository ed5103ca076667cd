import os
import shutil

import pytest


@pytest.fixture(scope="session")
def nec2c_path():
    """Debian's independent nec2c; tests using it skip without it unless NFMAP_REQUIRE_NEC2C=1."""
    path = shutil.which("nec2c")
    if path is None:
        if os.environ.get("NFMAP_REQUIRE_NEC2C") == "1":
            pytest.fail("nec2c is not on PATH but NFMAP_REQUIRE_NEC2C=1")
        pytest.skip("nec2c not on PATH")
    return path
