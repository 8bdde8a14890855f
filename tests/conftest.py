import json
import shutil
from pathlib import Path

import pytest
from hypothesis import settings

ROOT = Path(__file__).resolve().parent.parent
settings.register_profile("default", max_examples=40, deadline=None)
settings.register_profile("long", max_examples=2000, deadline=None)
settings.load_profile(__import__("os").environ.get("HYPOTHESIS_PROFILE", "default"))


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """One run of the demo recipe, shared by the tests that read its outputs."""
    from corpuskit.api import run
    out = tmp_path_factory.mktemp("demo") / "out"
    result = run(ROOT / "recipes" / "demo.toml", out, workers=1)
    return result


@pytest.fixture(scope="session")
def truth():
    return json.loads((ROOT / "sample_texts" / "ground-truth.json").read_text("utf-8"))


def copy_demo(tmp: Path) -> Path:
    """A private copy of the demo recipe and sources, for tests that change them."""
    shutil.copytree(ROOT / "sample_texts", tmp / "sample_texts")
    shutil.copytree(ROOT / "recipes", tmp / "recipes")
    return tmp / "recipes" / "demo.toml"
