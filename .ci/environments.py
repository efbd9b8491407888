#!/usr/bin/env python3
"""Build site_example in other Python/pandas/numpy/pyarrow environments and compare byte for byte.

Every environment gets its own virtual environment below ``.venvs/`` in this checkout
(pip's download cache too: nothing is kept outside the checkout). Each one builds
site_example and runs ``hcpsite export`` with the same SOURCE_DATE_EPOCH and
HCPSITE_ID_KEY as the reference environment (the README's ``.venv``); the outputs must be
identical, file for file and byte for byte. Each environment also runs
``tests/test_environments.py`` (the checks that need, say, pyarrow to mean anything).

An environment whose Python is not on this machine is skipped with the reason; an
environment that cannot be installed, a build that fails or an output that differs is a
failure (exit code 1).

    python3 .ci/environments.py             # set up every environment, build, compare
    python3 .ci/environments.py --list      # what would run, and which Pythons were found
    python3 .ci/environments.py --setup     # only create the environments
    python3 .ci/environments.py --oracle    # only create .venvs/oracle (Python 3.13 + phonometry)
    python3 .ci/environments.py --only py313-newest-arrow --keep /tmp/envs

This script uses the standard library only and runs under any Python 3.8 or newer.
"""
from __future__ import annotations

import argparse
import glob
import hashlib
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Dict, List, Optional, Tuple

REPO = Path(__file__).resolve().parent.parent
VENVS = REPO / ".venvs"
PIP_CACHE = VENVS / "pip-cache"
EXAMPLE = "site_example"
#: the build stamp and person-code key of every comparison build (any fixed values would do)
EPOCH = "1767225600"
ID_KEY = "environments-check-key"
#: packages whose releases can change the numbers or the bytes of the output
REPORTED = ("pandas", "numpy", "pyarrow", "plotly", "jinja2", "markdown", "nh3", "pyyaml")

#: The environments besides the reference one (the README's .venv: the machine's python3 with
#: the newest releases and without pyarrow). "pins" are exact versions; "declared floors" pins
#: pandas and numpy to the lowest versions pyproject.toml allows, so a floor that cannot work
#: fails here. pandas 3 with pyarrow stores text as Arrow strings; pandas 2.x keeps objects.
ENVIRONMENTS: List[Dict[str, object]] = [
    {"name": "py313-newest-arrow", "python": "3.13", "extra": ["pyarrow"], "pins": [],
     "about": "Python 3.13, newest pandas and numpy, with pyarrow (Arrow-backed strings)"},
    {"name": "py310-oldest", "python": "3.10", "extra": [], "pins": ["declared floors"],
     "about": "Python 3.10, the oldest pandas and numpy that pyproject.toml declares"},
    {"name": "py313-oldest", "python": "3.13", "extra": [], "pins": ["pandas==2.2.3", "numpy==2.1.0"],
     "about": "Python 3.13, the oldest pandas and numpy with wheels for 3.13"},
    {"name": "py310-newest-arrow", "python": "3.10", "extra": ["pyarrow"], "pins": [],
     "about": "Python 3.10, the newest pandas for 3.10 (2.x), with pyarrow"},
]

#: The oracle environment of tests/test_oracle.py (phonometry needs Python 3.13 or newer).
ORACLE = {"name": "oracle", "python": "3.13", "extra": ["phonometry"], "pins": [], "project": False,
          "about": "Python 3.13 with phonometry, the independent oracle of tests/test_oracle.py"}


def say(text: str) -> None:
    print(f"[environments] {text}", flush=True)


# ---------------------------------------------------------------------------------------
# what the project declares


def declared_dependencies(pyproject: Path = REPO / "pyproject.toml") -> List[str]:
    """Return the [project] dependencies of pyproject.toml (requirement strings)."""
    text = pyproject.read_text(encoding="utf-8")
    block = re.search(r"^dependencies\s*=\s*\[(.*?)^\]", text, re.S | re.M)
    if not block:
        raise SystemExit("environments: no dependencies = [...] in pyproject.toml")
    return re.findall(r'^\s*"([^"]+)"', block.group(1), re.M)


def declared_floor(requirements: List[str], name: str) -> str:
    """Return the version of the ``>=`` floor declared for *name*."""
    for req in requirements:
        m = re.match(rf"^{re.escape(name)}\s*(?:\[.*\])?\s*([^;]*)", req, re.I)
        if m:
            floor = re.search(r">=\s*([0-9][^,\s]*)", m.group(1))
            if floor:
                return floor.group(1)
    raise SystemExit(f"environments: pyproject.toml declares no '>=' floor for {name}")


def pins_for(env: Dict[str, object], requirements: List[str]) -> List[str]:
    """Return the exact pins of *env* ('declared floors' expands to pandas and numpy's floors)."""
    pins: List[str] = []
    for pin in env.get("pins", []):  # type: ignore[union-attr]
        if pin == "declared floors":
            pins += [f"pandas=={declared_floor(requirements, 'pandas')}",
                     f"numpy=={declared_floor(requirements, 'numpy')}"]
        else:
            pins.append(str(pin))
    return pins


# ---------------------------------------------------------------------------------------
# interpreters and virtual environments


def _python_version(exe: str) -> Optional[str]:
    try:
        proc = subprocess.run([exe, "-c", "import sys; print('%d.%d.%d' % sys.version_info[:3])"],
                              capture_output=True, text=True, timeout=60)
    except (OSError, subprocess.SubprocessError):
        return None
    return proc.stdout.strip() if proc.returncode == 0 else None


def find_python(version: str) -> Tuple[Optional[str], str]:
    """Return (interpreter, how it was found) for Python *version* ('3.13'), or (None, why not)."""
    env_var = "HCPSITE_PYTHON_" + version.replace(".", "_")
    candidates: List[str] = []
    if os.environ.get(env_var):
        candidates.append(os.environ[env_var])
    pyenv_root = os.environ.get("PYENV_ROOT") or os.path.expanduser("~/.pyenv")
    found = glob.glob(os.path.join(pyenv_root, "versions", f"{version}.*", "bin", "python"))
    found.sort(key=lambda p: [int(x) if x.isdigit() else 0 for x in
                              re.split(r"[.]", Path(p).parent.parent.name)], reverse=True)
    candidates += found
    for name in (f"python{version}",):
        which = shutil.which(name)
        if which:
            candidates.append(which)
    candidates += [f"/usr/bin/python{version}", f"/usr/local/bin/python{version}"]
    for exe in candidates:
        if not os.path.exists(exe):
            continue
        got = _python_version(exe)
        if got and (got == version or got.startswith(version + ".")):
            return exe, got
    looked = f"${env_var}, {pyenv_root}/versions/{version}.*, python{version} on PATH, /usr/bin, /usr/local/bin"
    return None, f"no Python {version} on this machine (looked in {looked})"


def venv_python(folder: Path) -> Path:
    return folder / "bin" / "python"


def requirements_of(env: Dict[str, object], declared: List[str]) -> List[str]:
    """Return everything pip installs into *env* (the project's own code runs from the checkout)."""
    reqs: List[str] = []
    if env.get("project", True):
        reqs += declared + ["pytest"]
    reqs += pins_for(env, declared) + [str(x) for x in env.get("extra", [])]  # type: ignore[union-attr]
    return reqs


def _pip(python: Path, reqs: List[str]) -> subprocess.CompletedProcess:
    pip_env = dict(os.environ, PIP_CACHE_DIR=str(PIP_CACHE), PIP_DISABLE_PIP_VERSION_CHECK="1")
    return subprocess.run([str(python), "-m", "pip", "install", "-q", "--only-binary=:all:"] + reqs,
                          capture_output=True, text=True, env=pip_env, cwd=str(REPO))


def _pip_errors(proc: subprocess.CompletedProcess) -> str:
    noise = ("WARNING: Location", "[notice]")
    return "\n".join([l for l in (proc.stdout + proc.stderr).splitlines() if not l.startswith(noise)][-25:])


def align_plotly(python: Path, version: Optional[str]) -> None:
    """Install the reference's plotly release (its plotly.js bundle is copied into the site)."""
    if version and versions(python).get("plotly") not in (None, version):
        proc = _pip(python, [f"plotly=={version}"])
        if proc.returncode != 0:
            raise RuntimeError(f"pip could not install plotly=={version}:\n{_pip_errors(proc)}")


def setup(env: Dict[str, object], declared: List[str], fresh: bool = False) -> Tuple[Optional[Path], str]:
    """Create (or reuse) the virtual environment of *env*. Return (its python, message).

    The python is None when the environment is skipped (its interpreter is missing); a
    failed install raises RuntimeError.
    """
    name = str(env["name"])
    exe, found = find_python(str(env["python"]))
    if exe is None:
        return None, f"SKIPPED {name}: {found}"
    folder = VENVS / name
    reqs = requirements_of(env, declared)
    spec = json.dumps({"python": found, "exe": exe, "requirements": reqs}, sort_keys=True)
    marker = folder / ".hcpsite-environment.json"
    if not fresh and marker.is_file() and marker.read_text(encoding="utf-8") == spec:
        return venv_python(folder), f"{name}: reusing {folder.relative_to(REPO)} (Python {found})"
    if folder.exists():
        shutil.rmtree(folder)
    started = time.monotonic()
    proc = subprocess.run([exe, "-m", "venv", str(folder)], capture_output=True, text=True)
    if proc.returncode != 0:
        shutil.rmtree(folder, ignore_errors=True)
        why = (proc.stderr or proc.stdout).strip().splitlines()[-1:] or ["?"]
        return None, f"SKIPPED {name}: Python {found} at {exe} cannot create a virtual environment ({why[0]})"
    proc = _pip(venv_python(folder), reqs)
    if proc.returncode != 0:
        raise RuntimeError(f"{name}: pip could not install {' '.join(reqs)}:\n{_pip_errors(proc)}")
    marker.write_text(spec, encoding="utf-8")
    return venv_python(folder), f"{name}: created with Python {found} in {time.monotonic() - started:.0f} s"


def versions(python: Path) -> Dict[str, str]:
    """Return the Python and REPORTED package versions of an interpreter."""
    code = ("import json, sys\nfrom importlib import metadata\nout = {'python': sys.version.split()[0]}\n"
            f"for name in {list(REPORTED)!r}:\n"
            "    try:\n        out[name] = metadata.version(name)\n"
            "    except metadata.PackageNotFoundError:\n        pass\n"
            "print(json.dumps(out))")
    proc = subprocess.run([str(python), "-c", code], capture_output=True, text=True)
    return json.loads(proc.stdout) if proc.returncode == 0 else {}


def describe(v: Dict[str, str]) -> str:
    return ", ".join(f"{k} {v[k]}" for k in ("python",) + REPORTED if k in v) or "versions unknown"


# ---------------------------------------------------------------------------------------
# building and comparing


def run_build(python: Path, out: Path) -> Tuple[bool, str]:
    """Build site_example into out/site and export it into out/export; return (ok, message)."""
    env = dict(os.environ, SOURCE_DATE_EPOCH=EPOCH, HCPSITE_ID_KEY=ID_KEY, PYTHONPATH=str(REPO))
    env.pop("HCPSITE_TEST_PAUSE_WRITE", None)
    for args in (["build", EXAMPLE, "--out", str(out / "site")], ["export", EXAMPLE, "--to", str(out / "export")]):
        proc = subprocess.run([str(python), "-m", "generator"] + args, capture_output=True, text=True,
                              env=env, cwd=str(REPO), timeout=900)
        if proc.returncode != 0:
            return False, f"'hcpsite {args[0]}' exited {proc.returncode}:\n{proc.stderr[-3000:]}"
    return True, ""


def tree(folder: Path) -> Dict[str, str]:
    """Return relative path -> sha256 of every file below *folder*."""
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def first_difference(a: bytes, b: bytes, context: int = 60) -> str:
    """Return a short description of where two byte strings first differ."""
    n = min(len(a), len(b))
    i = next((k for k in range(n) if a[k] != b[k]), n)
    lo = max(0, i - context)
    return (f"at byte {i} (sizes {len(a)} and {len(b)}):\n"
            f"      reference: {a[lo:i + context]!r}\n      this one:  {b[lo:i + context]!r}")


def compare(ref: Path, other: Path, limit: int = 5) -> List[str]:
    """Return the differences between two output folders (empty when identical)."""
    ta, tb = tree(ref), tree(other)
    problems = [f"only in the reference: {k}" for k in sorted(set(ta) - set(tb))]
    problems += [f"only in this environment: {k}" for k in sorted(set(tb) - set(ta))]
    differing = [k for k in sorted(set(ta) & set(tb)) if ta[k] != tb[k]]
    for k in differing[:limit]:
        problems.append(f"{k} differs {first_difference((ref / k).read_bytes(), (other / k).read_bytes())}")
    if len(differing) > limit:
        problems.append(f"... and {len(differing) - limit} more differing files")
    return problems


def run_env_tests(python: Path) -> Tuple[bool, str]:
    """Run tests/test_environments.py with *python*; return (ok, pytest's summary or its last lines)."""
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.run([str(python), "-m", "pytest", "-o", "addopts=", "-q", "-p", "no:cacheprovider",
                           "tests/test_environments.py"],
                          capture_output=True, text=True, env=env, cwd=str(REPO), timeout=900)
    lines = (proc.stdout + proc.stderr).strip().splitlines()
    return proc.returncode == 0, (lines[-1] if proc.returncode == 0 and lines else "\n".join(lines[-25:]))


def check(name: str, python: Path, work: Path, reference: Path, plotly_version: Optional[str]) -> Tuple[bool, str]:
    """Build, export and test in one environment; compare with the reference. Return (ok, report)."""
    t0 = time.monotonic()
    try:
        align_plotly(python, plotly_version)
    except RuntimeError as exc:
        return False, f"FAILED {name}: {exc}"
    label = f"{name} ({describe(versions(python))})"
    ok, message = run_build(python, work / name)
    if not ok:
        return False, f"FAILED {label}: {message}"
    problems: List[str] = []
    for part in ("site", "export"):
        problems += [f"{part}/{p}" for p in compare(reference / part, work / name / part)]
    if problems:
        return False, f"FAILED {label}: the output differs from the reference:\n  " + "\n  ".join(problems)
    tests_ok, summary = run_env_tests(python)
    if not tests_ok:
        return False, f"FAILED {label}: tests/test_environments.py failed:\n{summary}"
    files = len(tree(work / name / "site")) + len(tree(work / name / "export"))
    return True, (f"ok {label}: {files} files identical to the reference; tests/test_environments.py: "
                  f"{summary} ({time.monotonic() - t0:.0f} s)")


# ---------------------------------------------------------------------------------------


def main(argv: Optional[List[str]] = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--reference", default=str(REPO / ".venv" / "bin" / "python"),
                    help="python of the reference environment (default: the README's .venv)")
    ap.add_argument("--only", nargs="+", metavar="NAME", help="only these environments")
    ap.add_argument("--list", action="store_true", help="list the environments and the Pythons found")
    ap.add_argument("--setup", action="store_true", help="only create the environments")
    ap.add_argument("--oracle", action="store_true", help="only create .venvs/oracle (Python 3.13 + phonometry)")
    ap.add_argument("--fresh", action="store_true", help="recreate environments even when they exist")
    ap.add_argument("--jobs", type=int, default=2, metavar="N", help="environments checked at once (default 2)")
    ap.add_argument("--keep", metavar="DIR", help="write the builds into DIR and keep them")
    args = ap.parse_args(argv)

    declared = declared_dependencies()
    everything = ENVIRONMENTS + [ORACLE]
    chosen = [ORACLE] if args.oracle else ENVIRONMENTS
    if args.only:
        unknown = sorted(set(args.only) - {str(e["name"]) for e in everything})
        if unknown:
            ap.error(f"unknown environment(s): {', '.join(unknown)}")
        chosen = [e for e in everything if e["name"] in args.only]
    if args.list:
        for env in everything:
            exe, found = find_python(str(env["python"]))
            where = f"{exe} ({found})" if exe else found
            print(f"{env['name']}: {env['about']}\n    pip: {' '.join(requirements_of(env, declared))}\n"
                  f"    python: {where}")
        return 0

    started = time.monotonic()
    only_setup = args.oracle or args.setup
    reference = Path(args.reference)
    if not only_setup and not reference.exists():
        say(f"no reference environment at {reference}: create it first with the README's test command "
            f"(python3 -m venv .venv && .venv/bin/pip install -e '.[test]')")
        return 2

    VENVS.mkdir(exist_ok=True)
    pythons: Dict[str, Path] = {}
    failures: List[str] = []
    skipped: List[str] = []
    for env in chosen:
        try:
            python, message = setup(env, declared, fresh=args.fresh)
        except RuntimeError as exc:
            say(f"FAILED {exc}")
            failures.append(str(env["name"]))
            continue
        say(message)
        if python is None:
            skipped.append(str(env["name"]))
        else:
            pythons[str(env["name"])] = python
    if only_setup:
        for name, python in pythons.items():
            say(f"{name}: {python} ({describe(versions(python))})")
        say(f"set up in {time.monotonic() - started:.0f} s; {len(failures)} failed, {len(skipped)} skipped")
        return 1 if failures else 0

    ref_versions = versions(reference)
    work = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="hcpsite-environments-"))
    identical = 0
    try:
        t0 = time.monotonic()
        ok, message = run_build(reference, work / "reference")
        if not ok:
            say(f"FAILED reference build ({describe(ref_versions)}): {message}")
            return 1
        say(f"reference ({describe(ref_versions)}): built and exported in {time.monotonic() - t0:.0f} s")
        todo = [(n, p) for n, p in pythons.items() if n != ORACLE["name"]]
        with ThreadPoolExecutor(max_workers=max(1, args.jobs)) as pool:
            futures = [pool.submit(check, n, p, work, work / "reference", ref_versions.get("plotly"))
                       for n, p in todo]
            for (name, _), future in zip(todo, futures):
                ok, message = future.result()
                say(message)
                if ok:
                    identical += 1
                else:
                    failures.append(name)
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    say(f"{identical} identical, {len(failures)} failed, {len(skipped)} skipped "
        f"({', '.join(skipped) or 'none'}) in {time.monotonic() - started:.0f} s")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
