import os

os.environ.setdefault("OMP_NUM_THREADS", "1")
# the shared reference-ring cache is off in tests (each run computes its own reference rings, so no test
# depends on another's leftovers); tests of the cache set it to their own folder
os.environ.setdefault("CHAIRQM_REFERENCE_CACHE", "off")

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
