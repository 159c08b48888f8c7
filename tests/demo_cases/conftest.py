"""One scenario build per test session (trains both demo models once, on one thread)."""

from __future__ import annotations

from typing import Any

import pytest
import torch

from demo_cases.build import build_scenario

torch.set_num_threads(1)


@pytest.fixture(scope="session")
def scenario(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    return build_scenario(tmp_path_factory.mktemp("scenario"), seed=7, n_cases=40)
