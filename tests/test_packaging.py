"""The package as installed: which copy the tests import, and what the wheel ships.

.ci/run installs the wheel (``pip install .``, not editable) and sets
INCLINATION_TEST_INSTALLED=1; scripts/test.sh runs pytest from a folder outside the
source tree. Together they make the suite test what a user installs: a module, a
schema or the ``py.typed`` marker missing from the wheel fails here.
"""

from __future__ import annotations

import os
import sysconfig
from importlib import resources
from pathlib import Path

import pytest

import inclination

ROOT = Path(__file__).resolve().parents[1]
INSTALLED = os.environ.get("INCLINATION_TEST_INSTALLED") == "1"
needs_wheel = pytest.mark.skipif(
    not INSTALLED, reason="checks the installed wheel; set INCLINATION_TEST_INSTALLED=1"
)


@needs_wheel
def test_tests_import_the_installed_package_not_the_source_tree():
    # In site-packages of the running interpreter (CI keeps its venvs inside the checkout,
    # so "outside the checkout" would not do), and not the source folder.
    package_dir = Path(inclination.__file__).resolve().parent
    assert package_dir != (ROOT / "inclination").resolve(), package_dir
    assert package_dir.parent == Path(sysconfig.get_paths()["purelib"]).resolve(), package_dir


@needs_wheel
def test_wheel_ships_every_schema_module_and_the_typing_marker():
    installed = resources.files("inclination")
    for schema in sorted((ROOT / "schemas").glob("*.json")):
        assert (installed / "schemas" / schema.name).is_file(), schema.name
    for module in sorted((ROOT / "inclination").rglob("*.py")):
        rel = module.relative_to(ROOT / "inclination")
        assert installed.joinpath(*rel.parts).is_file(), rel


def test_typing_marker_is_in_the_package():
    # PEP 561: type checkers read the package's annotations only when it carries py.typed.
    assert (resources.files("inclination") / "py.typed").is_file()
