"""The built wheel alone carries everything a build needs (templates, content, rule sets)."""
from __future__ import annotations

import importlib.util
import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "site_example"

pytestmark = pytest.mark.slow

#: Files that must come inside the wheel: the build reads them from the installed package.
WHEEL_MUST_HOLD = (
    "generator/cli.py",
    "generator/build.py",
    "generator/templates/base.html",
    "generator/templates/style.css",
    "generator/content/cautions/general.md",
    "generator/content/glossary.md",
    "generator/content/methods/overview.md",
    "generator/rules/osha-1910.95.yaml",
    "generator/rules/niosh-rel.yaml",
    "generator/rules/eu-2003-10.yaml",
    "generator/rules/custom.yaml",
)

_IGNORE = shutil.ignore_patterns(".git", ".venv", "_site", "__pycache__", "*.egg-info", "build", "dist",
                                 "artifacts", ".pytest_cache", "site_example", "bench")


def _run(cmd: list[str], **kw) -> subprocess.CompletedProcess:
    """Run *cmd*, failing the test with its output when it fails."""
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300, **kw)
    assert proc.returncode == 0, f"{' '.join(map(str, cmd))} exited {proc.returncode}\n{proc.stdout}\n{proc.stderr}"
    return proc


def _build_wheel(src: Path, out: Path) -> Path:
    """Build the wheel of *src* into *out* without network access and return its path."""
    if importlib.util.find_spec("build") is not None:
        _run([sys.executable, "-m", "build", "--wheel", "--no-isolation", "--outdir", str(out), str(src)],
             cwd=src)
    else:  # pip is always there
        _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-w", str(out),
              str(src)], cwd=src)
    wheels = sorted(out.glob("hcpsite-*.whl"))
    assert len(wheels) == 1, f"expected one wheel, found {wheels}"
    return wheels[0]


@pytest.fixture(scope="module")
def installed(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """Build the wheel from a clean copy of the tree and install it into a fresh venv."""
    tmp = tmp_path_factory.mktemp("wheel")
    src = tmp / "src"
    shutil.copytree(ROOT, src, ignore=_IGNORE)
    wheel = _build_wheel(src, tmp / "dist")
    venv = tmp / "venv"
    _run([sys.executable, "-m", "venv", "--without-pip", str(venv)])
    vpy = venv / "bin" / "python"
    # pip of the test interpreter installs into the new venv (pip >= 22.3: --python)
    _run([sys.executable, "-m", "pip", "--python", str(vpy), "install", "--no-deps", "--no-index",
          "--disable-pip-version-check", str(wheel)])
    # third-party packages come from the test environment, appended AFTER the venv's own
    # site-packages (a .pth file), so the wheel's `generator` is the one imported
    site = Path(_run([str(vpy), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                     cwd=tmp).stdout.strip())
    deps = sorted({sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]})
    (site / "_hcpsite_test_deps.pth").write_text("\n".join(deps) + "\n", encoding="utf-8")
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    env.update(SOURCE_DATE_EPOCH="1767225600", HCPSITE_ID_KEY="wheel-test-key")
    return {"tmp": tmp, "wheel": wheel, "venv": venv, "python": vpy, "site": site, "env": env}


def test_wheel_holds_templates_content_and_rules(installed: dict) -> None:
    names = set(zipfile.ZipFile(installed["wheel"]).namelist())
    missing = [n for n in WHEEL_MUST_HOLD if n not in names]
    assert not missing, f"wheel lacks {missing}"
    assert not any(n.startswith(("tests/", "site_example/", "bench/")) for n in names)


def test_installed_package_resolves_from_the_venv(installed: dict) -> None:
    code = ("import generator, generator.resources as r; print(generator.__file__); "
            "print(r.templates_dir()); print(r.content_dir())")
    out = _run([str(installed["python"]), "-c", code], cwd=installed["tmp"], env=installed["env"]).stdout
    venv = installed["venv"].resolve()
    paths = [Path(line).resolve() for line in out.split()]
    assert len(paths) == 3
    for p in paths:
        assert venv in p.parents, f"{p} is not inside the fresh venv (the repo leaked in)"
        assert ROOT not in p.parents


def test_installed_console_script_builds_the_example(installed: dict) -> None:
    assert (EXAMPLE / "programme.yaml").is_file(), "site_example/ has no programme.yaml"
    prog = installed["tmp"] / "programme"
    shutil.copytree(EXAMPLE, prog, ignore=shutil.ignore_patterns("_site"))
    out = installed["tmp"] / "site"
    hcpsite = installed["venv"] / "bin" / "hcpsite"
    proc = subprocess.run([str(hcpsite), "build", str(prog), "--out", str(out)], capture_output=True, text=True,
                          cwd=installed["tmp"], env=installed["env"], timeout=300)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "Traceback" not in proc.stderr
    for page in ("index.html", "methods.html", "quality.html"):
        assert (out / page).is_file(), f"{page} missing from the installed build"
    assert (out / "index.html").stat().st_size > 1000
    assert (out / "assets" / "style.css").is_file() and (out / "assets" / "plotly.min.js").is_file()
    assert not (prog / "_site").exists(), "--out was ignored"
    # python -m generator takes the same arguments
    help_proc = subprocess.run([str(installed["python"]), "-m", "generator", "--help"], capture_output=True,
                               text=True, cwd=installed["tmp"], env=installed["env"], timeout=60)
    assert help_proc.returncode == 0 and "build" in help_proc.stdout
