import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))

DATA = ROOT / "tests" / "data"


@pytest.fixture(scope="session")
def root():
    return ROOT


@pytest.fixture(scope="session")
def hc19_path():
    return DATA / "19hc.pdb.gz"


@pytest.fixture(scope="session")
def library():
    from siteshift.structures.library import load_library
    return load_library()
