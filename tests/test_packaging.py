"""The package as a user installs it: built from pyproject into a fresh virtual environment, away from
the checkout, then `corpuskit new` and a run of the new project."""
import shutil
import subprocess
import sys
import sysconfig
from pathlib import Path

import pytest

from .conftest import ROOT


@pytest.mark.slow
def test_installed_package_makes_a_project_and_runs_it(tmp_path):
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True)
    py = venv / "bin" / "python"
    # The dependencies come from this environment (a .pth file); corpuskit itself is built (in an isolated
    # build environment, as pip does for a user) and installed.
    site = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                          check=True, capture_output=True, text=True).stdout.strip()
    (Path(site) / "deps.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    build = subprocess.run([str(py), "-m", "pip", "install", "--quiet", "--no-deps", str(ROOT)],
                           capture_output=True, text=True)
    assert build.returncode == 0, build.stderr[-2000:]
    work = tmp_path / "elsewhere"
    work.mkdir()
    cli = venv / "bin" / "corpuskit"
    made = subprocess.run([str(cli), "new", "proj", "--language", "qnv", "--name", "trial"], cwd=work,
                          capture_output=True, text=True)
    assert made.returncode == 0, made.stderr
    proj = work / "proj"
    assert (proj / "recipe.toml").exists() and (proj / "datasheet-answers.toml").exists()
    # A few source files and seed sets from the demo, as a user would put their own.
    for f in sorted((ROOT / "sample_texts" / "web").glob("*.txt"))[:10]:
        shutil.copy(f, proj / "sources" / f.name)
    shutil.copy(ROOT / "sample_texts" / "seeds" / "qnv-hill.txt", proj / "seeds" / "qnv.txt")
    shutil.copy(ROOT / "sample_texts" / "seeds" / "other.txt", proj / "seeds" / "other.txt")
    where = subprocess.run([str(py), "-c", "import corpuskit, os; print(os.path.dirname(corpuskit.__file__))"],
                           cwd=work, capture_output=True, text=True).stdout.strip()
    assert not where.startswith(str(ROOT / "corpuskit"))      # the installed copy, not the checkout
    check = subprocess.run([str(cli), "check", "proj/recipe.toml"], cwd=work, capture_output=True, text=True)
    assert check.returncode == 0, check.stdout + check.stderr
    ran = subprocess.run([str(cli), "run", "proj/recipe.toml", "--out", "out", "--workers", "1", "--no-progress"],
                         cwd=work, capture_output=True, text=True, timeout=600)
    assert ran.returncode == 0, ran.stdout[-3000:] + ran.stderr[-3000:]
    assert (work / "out" / "manifest.json").exists() and (work / "out" / "datasheet.md").exists()
