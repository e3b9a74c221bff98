"""The one import name: shearmix.solver and shearmix.tools, whatever the user's folder holds."""
import os
import subprocess
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _declared_packages():
    import tomllib  # Python 3.11+; the test environment's Python
    with open(os.path.join(ROOT, "pyproject.toml"), "rb") as fh:
        return set(tomllib.load(fh)["tool"]["setuptools"]["packages"])


def test_every_source_folder_is_a_declared_package():
    found = set()
    for top in ("solver", "tools"):
        for folder, dirs, files in os.walk(os.path.join(ROOT, top)):
            dirs[:] = [d for d in dirs if d != "__pycache__"]
            if "__init__.py" in files:
                rel = os.path.relpath(folder, ROOT).replace(os.sep, ".")
                found.add("shearmix." + rel)
    assert found == _declared_packages()


def test_user_modules_named_solver_and_tools_do_not_shadow_ours(tmp_path):
    """A user's own solver.py and tools/ package in the working folder (the
    case that broke the old top-level names) leave shearmix untouched."""
    (tmp_path / "solver.py").write_text("raise RuntimeError('user solver imported')\n")
    (tmp_path / "tools").mkdir()
    (tmp_path / "tools" / "__init__.py").write_text("raise RuntimeError('user tools imported')\n")
    code = ("import shearmix.solver.case, shearmix.tools.cli, shearmix.solver.run.simulation\n"
            "print(shearmix.solver.case.__file__)")
    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                         text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == os.path.join(ROOT, "solver", "case.py")
    cli = os.path.join(os.path.dirname(sys.executable), "shearmix")
    keys = subprocess.run([cli, "keys"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert keys.returncode == 0, keys.stderr
    assert "parameters.Re" in keys.stdout


def test_engine_never_imports_the_tools():
    """solver/ is the engine; tools/ is built around it, never the other way."""
    offenders = []
    for folder, dirs, files in os.walk(os.path.join(ROOT, "solver")):
        for name in files:
            if name.endswith(".py"):
                path = os.path.join(folder, name)
                text = open(path, encoding="utf-8").read()
                if "shearmix.tools" in text or "from tools" in text or "import tools" in text:
                    offenders.append(os.path.relpath(path, ROOT))
    assert offenders == []
