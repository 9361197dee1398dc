"""The code base keeps its own rules: lint settings, private names, one home for §5.

- ruff passes with the settings of pyproject.toml [tool.ruff].
- No module of the package imports another module's private (``_x``) names
  (docs/architecture.md, "Rules of the layout").
- The surface geometry of docs/conventions.md §5 (dip from the normal's Z component,
  dip direction and trace angle from its X and Y components) is computed in one
  function, :func:`inclination.planes.geometry.surface_geometry`, and nowhere else.
"""

from __future__ import annotations

import ast
import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "inclination"

# The one module allowed to compute the §5 quantities (docs/conventions.md §5).
SECTION5_HOME = "inclination/planes/geometry.py"


def test_ruff_check_is_clean():
    # ruff is part of the test extra; a finding fails the suite like any other defect.
    result = subprocess.run(
        [sys.executable, "-m", "ruff", "check", "--no-cache", str(ROOT)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert result.returncode == 0, result.stdout + result.stderr


# ----------------------------------------------------------------------------- private names


def _module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _is_private(part: str) -> bool:
    return part.startswith("_") and not (part.startswith("__") and part.endswith("__"))


def _resolve(module: str, is_package: bool, node: ast.ImportFrom) -> str:
    """The absolute module an ``from X import ...`` names, for relative imports too."""
    if node.level == 0:
        return node.module or ""
    base = module.split(".")
    # In a package's __init__, "." is the package itself; in a module, its parent.
    base = base if is_package else base[:-1]
    if node.level > 1:
        base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def private_imports(path: Path, root: Path = ROOT) -> list[str]:
    """Imports in ``path`` of names private to a module or package it is not part of.

    A private name ``_x`` belongs to the module or package that holds it: the private
    helpers of ``grains`` belong to ``inclination.grains``, the private module
    ``inclination.report._io`` to ``inclination.report``. A module may import a private
    name only from inside its owner. So ``inclination._validation`` (the package's
    boundary checks, the private module of the style guide) serves every module of
    ``inclination``, and ``report._io`` the modules of ``report`` only.
    """
    module = _module_name(path, root)
    is_package = path.name == "__init__.py"
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found = []

    def check(full_name: str, line: int) -> None:
        parts = full_name.split(".")
        if parts[0] != "inclination":
            return
        for n, part in enumerate(parts):
            if _is_private(part):
                owner = ".".join(parts[:n])
                if not (module == owner or module.startswith(owner + ".")):
                    found.append(f"{path.relative_to(root)}:{line}: {full_name}")
                    return

    module_aliases = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            source = _resolve(module, is_package, node)
            for alias in node.names:
                full = f"{source}.{alias.name}"
                check(full, node.lineno)
                module_aliases[alias.asname or alias.name] = full
        elif isinstance(node, ast.Import):
            for alias in node.names:
                check(alias.name, node.lineno)
                if alias.asname:
                    module_aliases[alias.asname] = alias.name
    # Attribute access on an imported name: ``grains._check_map`` after ``from . import grains``.
    for node in ast.walk(tree):
        if (
            isinstance(node, ast.Attribute)
            and isinstance(node.value, ast.Name)
            and node.value.id in module_aliases
            and _is_private(node.attr)
        ):
            check(f"{module_aliases[node.value.id]}.{node.attr}", node.lineno)
    return found


def _package_files() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def test_no_module_imports_a_private_name_of_another_module():
    found = [hit for path in _package_files() for hit in private_imports(path)]
    assert not found, "private names imported across modules:\n" + "\n".join(found)


@pytest.mark.parametrize(
    ("module", "source", "expected"),
    [
        # A private helper of another module: the case the rule exists for.
        ("inclination/network.py", "from .grains import _check_map\n", 1),
        ("inclination/network.py", "from . import grains\nx = grains._check_map\n", 1),
        ("inclination/demo.py", "from inclination.grains import _gather_rows\n", 1),
        # A private module belongs to its package: report/ may use report/_io ...
        ("inclination/report/tables.py", "from ._io import write_text_atomic\n", 0),
        # ... but not its private names, and modules outside report/ may not use it.
        ("inclination/report/tables.py", "from ._io import _clean_json\n", 1),
        ("inclination/pipeline.py", "from .report._io import staged_output_dir\n", 1),
        # inclination._validation belongs to the whole package.
        ("inclination/crystal/lattice.py", "from .._validation import check_one_of\n", 0),
        ("inclination/maps.py", "from ._validation import check_one_of\n", 0),
        # Dunder names and other libraries are not the package's private names.
        ("inclination/maps.py", "from . import __version__\nfrom numpy import _core\n", 0),
    ],
)
def test_private_import_rule_on_known_cases(tmp_path, module, source, expected):
    # The rule checked on hand-written snippets, so that the scan above cannot pass by
    # finding nothing at all.
    target = tmp_path / module
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_text(source, encoding="utf-8")
    assert len(private_imports(target, tmp_path)) == expected


# ----------------------------------------------------------------------------- §5 in one place

_NORMAL_NAME = re.compile(r"^n$|^n_|normal")
_COMPONENT_NAME = re.compile(r"^n_?([xyz])$")


def _base_name(node: ast.AST) -> str | None:
    if isinstance(node, ast.Name):
        return node.id
    if isinstance(node, ast.Attribute):
        return node.attr
    return None


def _normal_components(node: ast.AST) -> set[str]:
    """Components (x, y, z) of a plane normal that an expression reads.

    A component is read as ``normal[..., k]`` / ``n[:, k]`` on a name that reads as a
    normal, or as a name ``nx``, ``n_y``, ``nz``.
    """
    found = set()
    for sub in ast.walk(node):
        if isinstance(sub, ast.Name):
            match = _COMPONENT_NAME.match(sub.id)
            if match:
                found.add(match.group(1))
        elif isinstance(sub, ast.Subscript):
            base = _base_name(sub.value)
            if base is None or not _NORMAL_NAME.search(base):
                continue
            index = sub.slice
            last = index.elts[-1] if isinstance(index, ast.Tuple) else index
            if isinstance(last, ast.Constant) and last.value in (0, 1, 2):
                found.add("xyz"[last.value])
    return found


def _call_name(node: ast.Call) -> str | None:
    return _base_name(node.func)


def section5_formulas(source: str) -> list[tuple[int, str]]:
    """(line, quantity) of each §5 formula in ``source``.

    Dip: arccos of an expression reading the normal's Z component. Dip azimuth or
    trace angle: arctan2 of two expressions reading its X and Y components.
    """
    found = []
    for node in ast.walk(ast.parse(source)):
        if not isinstance(node, ast.Call):
            continue
        name = _call_name(node)
        if name in ("arccos", "acos") and node.args:
            if "z" in _normal_components(node.args[0]):
                found.append((node.lineno, "dip"))
        elif name in ("arctan2", "atan2") and len(node.args) == 2:
            a, b = (_normal_components(arg) for arg in node.args)
            if {"x", "y"} <= a | b and a and b:
                found.append((node.lineno, "dip azimuth or trace angle"))
    return found


def test_section5_quantities_are_computed_in_one_function():
    hits = {}
    for path in _package_files():
        rel = path.relative_to(ROOT).as_posix()
        if rel == SECTION5_HOME:
            continue
        for line, quantity in section5_formulas(path.read_text(encoding="utf-8")):
            hits.setdefault((rel, quantity), []).append(line)
    outside = hits
    assert not outside, (
        f"§5 quantities computed outside {SECTION5_HOME} (call surface_geometry): "
        + "; ".join(f"{p} lines {lines}: {q}" for (p, q), lines in sorted(outside.items()))
    )


def test_the_one_section5_function_is_found_by_the_scan():
    # The scan must see the real implementation, or it could pass by matching nothing.
    quantities = {q for _, q in section5_formulas((ROOT / SECTION5_HOME).read_text("utf-8"))}
    assert quantities == {"dip", "dip azimuth or trace angle"}


@pytest.mark.parametrize(
    ("source", "expected"),
    [
        ("dip = np.rad2deg(np.arccos(np.clip(np.abs(normal[..., 2]), 0, 1)))", ["dip"]),
        ("d = np.degrees(np.arccos(abs(nz)))", ["dip"]),
        ("a = np.arctan2(-normals_s[:, 1], -normals_s[:, 0])", ["dip azimuth or trace angle"]),
        ("t = np.arctan2(nx, -ny) % 180", ["dip azimuth or trace angle"]),
        # Not §5: a rotation angle, a line fit's direction, an angle between vectors.
        ("w = 2 * np.arccos(np.abs(q[..., 0]))", []),
        ("theta = 0.5 * np.arctan2(2.0 * sxy, sxx - syy)", []),
        ("b = np.arccos(np.clip(cos_beta, 0.0, 1.0))", []),
        ("phi = np.arctan2(q1 * q3 - q0 * q2, -q0 * q1 - q2 * q3)", []),
    ],
)
def test_section5_scan_on_known_snippets(source, expected):
    assert [q for _, q in section5_formulas(source)] == expected
