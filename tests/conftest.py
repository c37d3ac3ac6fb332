from pathlib import Path

import pytest

import edgetally

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
EXAMPLE_FILES = sorted(EXAMPLES.glob("*.toml"))


@pytest.fixture(scope="session")
def designs():
    """Every bundled example's Design, by file stem."""
    return {p.stem: edgetally.design(edgetally.load_spec(p)) for p in EXAMPLE_FILES}
