"""The installed package is the one built from this checkout (`pip install tools/python`)."""

import re
from pathlib import Path

import equiscan
from conftest import REPO

SOURCE = REPO / "tools" / "python"


def test_installed_modules_are_this_checkouts():
    installed = Path(equiscan.__file__).parent
    for src in (SOURCE / "python" / "equiscan").glob("*.py"):
        assert (installed / src.name).read_text() == src.read_text(), (
            f"{installed / src.name} differs from {src}: run `pip install tools/python` again"
        )


def test_versions_agree():
    cargo = (SOURCE / "Cargo.toml").read_text()
    pyproject = (SOURCE / "pyproject.toml").read_text()
    version = re.search(r'^version = "([^"]+)"', cargo, re.M).group(1)
    assert equiscan.__version__ == version
    assert re.search(r'^version = "([^"]+)"', pyproject, re.M).group(1) == version
