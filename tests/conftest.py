import pytest

from helpers import WATER, make_molecule


@pytest.fixture
def water():
    return make_molecule(*WATER)
