import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import pytest  # noqa: E402
import yaml  # noqa: E402


@pytest.fixture
def write_config(tmp_path):
    """Write a configuration mapping (or raw text) to tmp_path/config.yaml and return its path."""
    def _write(cfg, name="config.yaml"):
        p = tmp_path / name
        p.write_text(cfg if isinstance(cfg, str) else yaml.safe_dump(cfg, sort_keys=False))
        return p
    return _write
