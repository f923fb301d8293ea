"""The installed name is `lagwise`: a built wheel holds only the `lagwise` package (with the engine,
the app, the CSS and the demo data inside it), and in a fresh virtual environment holding that
wheel `import lagwise` works while `import engine` and `import app` fail."""

import subprocess
import sys
import venv
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def wheel(tmp_path_factory):
    out = tmp_path_factory.mktemp("wheel")
    res = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps",
                          "-q", "-w", str(out), str(ROOT)], capture_output=True, text=True,
                         timeout=300)
    assert res.returncode == 0, res.stderr
    (path,) = out.glob("lagwise-*.whl")
    return path


def test_wheel_holds_only_the_lagwise_package(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    tops = {n.split("/")[0] for n in names}
    assert tops == {"lagwise", wheel.name.split("-")[0] + "-" + wheel.name.split("-")[1]
                    + ".dist-info"}, tops
    for needed in ("lagwise/__init__.py", "lagwise/engine/__init__.py", "lagwise/app/main.py",
                   "lagwise/engine/laws/tables/fixed_b.json", "lagwise/assets/lagwise.css",
                   "lagwise/demo_data/freight_index.csv"):
        assert needed in names, needed


def test_fresh_venv_imports_lagwise_not_engine_or_app(wheel, tmp_path):
    env_dir = tmp_path / "venv"
    venv.create(env_dir, with_pip=False)
    py = env_dir / "bin" / "python"
    site = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                          capture_output=True, text=True, check=True).stdout.strip()
    res = subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target",
                          site, str(wheel)], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    # the third-party dependencies come from the test environment, appended after the fresh
    # venv's own site-packages (so the wheel's copy of lagwise is the one imported)
    deps = [p for p in sys.path if p.endswith("site-packages")]
    (Path(site) / "outer_dependencies.pth").write_text("\n".join(deps) + "\n")
    probe = (
        "import importlib.util, lagwise, sys\n"
        "print(lagwise.__file__)\n"
        "print(importlib.util.find_spec('engine') is None, importlib.util.find_spec('app') is None)\n"
        "t = lagwise.load_table(lagwise.demo_file())\n"
        "print(round(float(lagwise.fit_ols(t, 'exret_1m', ['credit_spread']).params.iloc[1]), 8))\n")
    res = subprocess.run([str(py), "-c", probe], capture_output=True, text=True, cwd=tmp_path,
                         timeout=120)
    assert res.returncode == 0, res.stderr
    where, missing, slope = res.stdout.strip().splitlines()
    assert where.startswith(site)
    assert missing == "True True"
    assert float(slope) != 0.0
    # the command line finds the bundled demo files after a normal install, and says its version
    for args, check in ((["demo", "freight_index.csv"], lambda out: out.startswith(site)
                         and Path(out).is_file()),
                        (["--version"], lambda out: out == "lagwise " + (
                            ROOT / "pyproject.toml").read_text().split('version = "')[1]
                         .split('"')[0])):
        res = subprocess.run([str(py), "-m", "lagwise.app.cli", *args], capture_output=True,
                             text=True, cwd=tmp_path, timeout=120)
        assert res.returncode == 0, res.stderr
        assert check(res.stdout.strip()), (args, res.stdout)
