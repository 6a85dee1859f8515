"""Packaging checks: one version for Python and JS; a front-end bundle that is present and fresh."""

from __future__ import annotations

import importlib.metadata
import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

# Only _version is imported, so these checks run whatever state the rest of the package is in.
import curvewright._version as version_module

ROOT = Path(__file__).resolve().parent.parent
PACKAGE_DIR = Path(version_module.__file__).resolve().parent
BUNDLE = PACKAGE_DIR / "static" / "widget.js"
JS_DIR = ROOT / "js"

# Files under js/ that esbuild never bundles, so editing them cannot make the bundle stale.
_NOT_BUNDLED_SUFFIXES = (".test.ts", ".test.js", ".test.mjs", ".spec.ts", ".spec.js")
# A relative import in a front-end source, e.g. `from "../src/curvewright/expr_spec.json"`.
_RELATIVE_IMPORT = re.compile(r"""\bfrom\s+["'](\.\.?/[^"']+)["']""")


def _imported_from_outside_js(sources: list[Path]) -> set[Path]:
    """Files outside js/ that the front-end sources import, which esbuild bundles too."""
    found = set()
    for source in sources:
        for spec in _RELATIVE_IMPORT.findall(source.read_text(encoding="utf-8")):
            target = (source.parent / spec).resolve()
            if target.is_file() and JS_DIR.resolve() not in target.parents:
                found.add(target)
    return found


def _package_json() -> dict[str, object]:
    path = ROOT / "package.json"
    assert path.is_file(), f"{path} is missing; the front end's package.json must sit at the root"
    data = json.loads(path.read_text(encoding="utf-8"))
    assert isinstance(data, dict)
    return data


def test_python_version_matches_package_json() -> None:
    js_version = _package_json().get("version")
    assert js_version == version_module.__version__, (
        f"package.json has version {js_version!r} but src/curvewright/_version.py has "
        f"{version_module.__version__!r}; the two must be bumped together"
    )


def test_installed_metadata_matches_version_module() -> None:
    # The metadata is written at install time from _version.py (hatch's version source), so a
    # mismatch means the environment holds a stale install.
    try:
        installed = importlib.metadata.version("curvewright")
    except importlib.metadata.PackageNotFoundError:
        pytest.skip("curvewright is not installed (running from src/ via PYTHONPATH)")
    assert installed == version_module.__version__, (
        f"installed metadata says {installed!r}, _version.py says {version_module.__version__!r}: "
        "reinstall with `make venv` (or pip install -e .)"
    )


def test_package_exports_the_same_version() -> None:
    if not (PACKAGE_DIR / "__init__.py").is_file():
        pytest.skip("src/curvewright/__init__.py does not exist yet")
    import curvewright

    assert getattr(curvewright, "__version__", None) == version_module.__version__


def test_bundle_exists() -> None:
    assert BUNDLE.is_file(), f"{BUNDLE} is missing: run `make build-js` (npm run build)"
    assert BUNDLE.stat().st_size > 0, f"{BUNDLE} is empty"


def test_bundle_is_newer_than_every_js_source() -> None:
    assert BUNDLE.is_file(), f"{BUNDLE} is missing: run `make build-js` (npm run build)"
    assert JS_DIR.is_dir(), f"{JS_DIR} is missing"
    bundle_mtime = BUNDLE.stat().st_mtime
    sources = [
        p for p in JS_DIR.rglob("*") if p.is_file() and not p.name.endswith(_NOT_BUNDLED_SUFFIXES)
    ]
    assert sources, f"no front-end sources found under {JS_DIR}"
    # The expression spec is shared with the Python side, so it lives in the package, not js/.
    outside = _imported_from_outside_js(sources)
    assert ROOT / "src" / "curvewright" / "expr_spec.json" in outside, outside
    assert ROOT / "src" / "curvewright" / "params_spec.json" in outside, outside
    sources += sorted(outside)
    newer = sorted(str(p.relative_to(ROOT)) for p in sources if p.stat().st_mtime > bundle_mtime)
    assert not newer, f"the bundle is older than {newer}: rebuild with `make build-js`"


# anywidget accepts an ES module whose default export is an object with render/initialize or
# a function returning one, or (older style) a module with a named `render` export.
_PROBE = """
const m = await import(process.argv[1]);
const d = m.default;
const isWidget = (o) =>
  !!o && typeof o === "object" && ["render", "initialize"].some((k) => typeof o[k] === "function");
let kind = "none";
if (isWidget(d)) kind = "object";
else if (typeof d === "function") kind = "factory";
else if (typeof m.render === "function") kind = "named";
console.log(kind);
"""


def test_bundle_is_an_es_module_anywidget_can_load() -> None:
    node = shutil.which("node")
    if node is None:
        pytest.skip("node is not on PATH")
    assert BUNDLE.is_file(), f"{BUNDLE} is missing: run `make build-js` (npm run build)"
    proc = subprocess.run(
        [node, "--input-type=module", "-e", _PROBE, BUNDLE.as_uri()],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert proc.returncode == 0, f"node could not import the bundle:\n{proc.stderr}"
    assert proc.stdout.strip() in {"object", "factory", "named"}, (
        "the bundle exports neither a default widget object/factory nor a named render: "
        f"{proc.stdout!r}"
    )
