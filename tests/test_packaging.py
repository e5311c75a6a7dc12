"""The import names `tracker`, `physics`, `fallcam` belong to our distribution only, and the
tests run against the installed package."""

import ast
import importlib.metadata
import pathlib

import fallcam
import physics
import tracker


def test_import_names_belong_to_fallcam_only():
    owners = importlib.metadata.packages_distributions()
    for name in ("tracker", "physics", "fallcam"):
        assert owners.get(name) == ["fallcam"], f"{name} is claimed by {owners.get(name)}"


def test_physics_never_imports_tracker():
    root = pathlib.Path(physics.__file__).parent
    offenders = []
    for path in root.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                mods = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                mods = [node.module or ""]
            else:
                continue
            if any(m == "tracker" or m.startswith("tracker.") or m.startswith("fallcam") for m in mods):
                offenders.append(f"{path.name}:{node.lineno}")
    assert not offenders, f"physics imports tracker/fallcam at {offenders}"


def test_tracker_never_imports_fallcam():
    root = pathlib.Path(tracker.__file__).parent
    for path in root.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("fallcam"):
                raise AssertionError(f"tracker imports fallcam at {path.name}:{node.lineno}")


def test_version_matches_metadata():
    assert fallcam.__version__ == importlib.metadata.version("fallcam")


def test_tests_import_the_installed_package():
    """With a regular (non-editable) install, as CI does, the modules come from site-packages,
    not from the working copy."""
    import json

    dist = importlib.metadata.distribution("fallcam")
    direct = dist.read_text("direct_url.json")
    if direct and json.loads(direct).get("dir_info", {}).get("editable"):
        return  # a developer's editable install maps the imports to the checkout on purpose
    for module in (tracker, physics, fallcam):
        installed = pathlib.Path(dist.locate_file(f"{module.__name__}/__init__.py")).resolve()
        assert pathlib.Path(module.__file__).resolve() == installed


def test_readme_shows_the_same_safety_cautions_as_the_reports():
    from fallcam.safety import SAFETY_CAUTIONS

    readme = pathlib.Path(__file__).resolve().parents[1] / "README.md"
    text = readme.read_text(encoding="utf-8")
    for caution in SAFETY_CAUTIONS:
        assert f"- {caution}" in text, caution[:60]
