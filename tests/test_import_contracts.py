"""The layers hold: the import contracts in pyproject.toml pass, and the linter can fail.

``lint-imports`` (import-linter) reads every import statement of monitor, dashboard and
demo_db — deferred ones inside functions too — and checks the contracts declared under
``[tool.importlinter]``. A second run over the real code with a contract it breaks on purpose
shows the check is live. The last test keeps the rule that an import inside a function says why.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
LINT_IMPORTS = Path(sys.executable).with_name("lint-imports")


def lint_imports(*args, cwd=ROOT):
    if not LINT_IMPORTS.exists():
        pytest.fail(f"lint-imports is not installed beside {sys.executable}: install the test extra")
    # --no-cache: no cache folder is left in the checkout.
    return subprocess.run([str(LINT_IMPORTS), "--no-cache", "--no-logo", *args], cwd=cwd,
                          capture_output=True, text=True, timeout=300)


def test_import_contracts_are_kept():
    proc = lint_imports()
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "0 broken" in proc.stdout


def test_a_broken_contract_fails_the_check(tmp_path):
    # The real code, one contract it breaks: the statistics do import the exceptions.
    config = tmp_path / "broken.toml"
    config.write_text(
        "[tool.importlinter]\n"
        'root_packages = ["monitor"]\n'
        "[[tool.importlinter.contracts]]\n"
        'name = "statistics import no exceptions (false on purpose)"\n'
        'type = "forbidden"\n'
        'source_modules = ["monitor.stats"]\n'
        'forbidden_modules = ["monitor.errors"]\n'
    )
    proc = lint_imports(str(config))
    assert proc.returncode == 1, proc.stdout + proc.stderr
    assert "BROKEN" in proc.stdout and "monitor.stats." in proc.stdout and "-> monitor.errors" in proc.stdout


def test_the_layers_contract_names_every_part_of_monitor():
    # exhaustive = true makes lint-imports refuse a sub-package that no layer names; check that
    # the option is there, so a new module has to be placed deliberately.
    import tomllib

    contracts = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["importlinter"]["contracts"]
    layers = next(c for c in contracts if c["type"] == "layers" and c.get("containers") == ["monitor"])
    assert layers["exhaustive"] is True


# Files with imports inside functions that do not say why yet; each is being rewritten on its
# own branch. An entry that no longer has any (or no longer exists) fails the test below, so the
# list only shrinks.
PENDING_LAZY_REASONS: set[str] = set()


def _unexplained_imports(path: Path) -> list[int]:
    """Line numbers of imports inside a function not preceded by a ``# lazy: why`` comment."""
    lines = path.read_text(encoding="utf-8").splitlines()
    found = set()
    for func in ast.walk(ast.parse("\n".join(lines))):
        if not isinstance(func, (ast.FunctionDef, ast.AsyncFunctionDef)):
            continue
        for node in ast.walk(func):
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                # The comment sits above the block of imports this one belongs to.
                above = node.lineno - 2
                while above >= 0 and lines[above].strip().startswith(("from ", "import ")):
                    above -= 1
                if above < 0 or "# lazy:" not in lines[above]:
                    found.add(node.lineno)
    return sorted(found)


def _python_files():
    for package in ("monitor", "dashboard", "demo_db", "migrations"):
        yield from sorted((ROOT / package).rglob("*.py"))


def test_imports_inside_functions_say_why():
    unexplained = {}
    for path in _python_files():
        name = path.relative_to(ROOT).as_posix()
        lines = _unexplained_imports(path)
        if lines and name not in PENDING_LAZY_REASONS:
            unexplained[name] = lines
    assert not unexplained, (
        "imports inside functions without a '# lazy: why' comment above them "
        f"(move them to the top of the module, or say why they are deferred): {unexplained}")


def test_pending_list_only_names_files_that_still_need_it():
    stale = sorted(name for name in PENDING_LAZY_REASONS
                   if not (ROOT / name).exists() or not _unexplained_imports(ROOT / name))
    assert not stale, f"remove from PENDING_LAZY_REASONS (nothing left to explain): {stale}"
