import copy
import tomllib

import pytest

from helpers import BASE_TOML


@pytest.fixture
def base_doc():
    return copy.deepcopy(tomllib.loads(BASE_TOML))
