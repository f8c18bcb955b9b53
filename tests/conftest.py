import os
import sys
from pathlib import Path

import pytest
from hypothesis import settings

sys.path.insert(0, str(Path(__file__).parent))

from helpers import small_case_files  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def small_case(tmp_path):
    """Twenty 1-ha pine stands aged 0..95 and a scenario over them, written to tmp_path."""
    layer, scenario = small_case_files(tmp_path)
    return tmp_path, layer, scenario


# CI runs the property tests on a fixed sequence of examples, so a red build is reproducible;
# locally they explore new examples on every run.
settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")


@pytest.fixture(autouse=True, scope="session")
def _private_cache(tmp_path_factory):
    """Keep the tests' adjacency cache out of the user's cache directory."""
    os.environ["YIELDSCAPE_CACHE_DIR"] = str(tmp_path_factory.mktemp("cache"))
