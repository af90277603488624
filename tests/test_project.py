"""Project-level checks: the README's commands, CI, help texts, packaging, lint."""

from __future__ import annotations

import importlib
import importlib.util
import os
import pkgutil
import re
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from perfcheck import cli, db
from perfcheck.cli import main

ROOT = Path(__file__).resolve().parent.parent


def readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    setup = text.split("## Set-up on a fresh machine", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```\n(.+?)\n```", setup)


def test_readme_has_exactly_two_setup_commands_and_ci_runs_the_test_one():
    demo, tests = readme_commands()
    assert "perfcheck demo" in demo
    assert "pytest" in tests
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert tests in ci, "the README's test command must appear verbatim in .ci/run"


def test_every_command_has_help_with_an_example_and_is_in_the_readme():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    runner = CliRunner()
    listed = runner.invoke(main, ["--help"]).output
    for name in cli.COMMANDS:
        result = runner.invoke(main, [name, "--help"])
        assert result.exit_code == 0, name
        assert "Example" in result.output, f"{name} --help has no example"
        assert f"perfcheck {name}" in readme, f"{name} is not documented in the README"
        assert main.get_command(None, name).help
        assert f"  {name} " in listed


def test_the_command_table_names_every_command_of_every_module():
    found = {}
    for info in pkgutil.iter_modules(cli.__path__):
        module = importlib.import_module(f"perfcheck.cli.{info.name}")
        found.update({c.name: info.name for c in getattr(module, "COMMANDS", [])})
    assert found == {name: module for name, (module, _) in cli.COMMANDS.items()}


HEAVY = ("pandas", "numpy", "duckdb", "pvlib", "matplotlib", "statsmodels", "jinja2", "scipy")
# Prints the heavy libraries really loaded (a module the CLI names lazily is not loaded yet).
LOADED = ("import sys\nfrom perfcheck.cli import main\ntry:\n"
          "    main(sys.argv[1:], prog_name='perfcheck')\nexcept SystemExit:\n    pass\n"
          f"print(sorted(m for m in {HEAVY!r} if m in sys.modules and "
          "type(sys.modules[m]).__name__ != '_LazyModule'))")


def completing(words: str) -> dict[str, str]:
    return {"_PERFCHECK_COMPLETE": "bash_complete", "COMP_WORDS": words,
            "COMP_CWORD": str(len(words.split()) - 1)}


@pytest.mark.parametrize("args, env", [
    (["--version"], {}),
    (["--help"], {}),
    *(([name, "--help"], {}) for name in cli.COMMANDS),
    ([], completing("perfcheck c")),
    ([], completing("perfcheck check --")),
])
def test_help_version_and_completion_import_no_heavy_library(args, env):
    """The start-up promise of the README (well under 0.3 s; measured in tests/bench_cli.py):
    version, help and completion load none of the heavy libraries."""
    out = subprocess.run([sys.executable, "-c", LOADED, *args], capture_output=True, text=True,
                         env={**os.environ, **env}, check=True)
    assert out.stdout.splitlines()[-1] == "[]", out.stdout
    if env == completing("perfcheck c"):
        assert "plain,check" in out.stdout and "plain,capacity" in out.stdout
    if env == completing("perfcheck check --"):
        assert "plain,--json" in out.stdout and "plain,--from" in out.stdout



def test_the_command_line_runs_numpy_s_matrix_products_on_one_thread():
    """perfcheck.cli sets OpenBLAS to one thread before numpy loads (the command's small
    products ran slower on threads, and a long dot product's last digits followed the core
    count); a value the user set is kept."""
    probe = ("import os, sys\nimport perfcheck.cli\n"
             "print('numpy' in sys.modules, os.environ['OPENBLAS_NUM_THREADS'])")
    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"}
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         env=env, check=True)
    assert out.stdout.split() == ["False", "1"], out.stdout
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         env={**env, "OPENBLAS_NUM_THREADS": "2"}, check=True)
    assert out.stdout.split() == ["False", "2"], out.stdout

# Loads every pvlib module perfcheck uses through its binding, then prints the package's class,
# pvlib's version and whether the modules only pvlib's __init__ loads were loaded.
PVLIB_USED = (
    "import importlib.metadata, sys\nfrom perfcheck import model, physics\n"
    "for m in ('atmosphere', 'bifacial', 'clearsky', 'iam', 'irradiance', 'spa', 'temperature',"
    " 'tracking'):\n    getattr(physics.pvlib, m)\n"
    "print(type(physics.pvlib).__name__, physics.pvlib.__version__ == "
    "importlib.metadata.version('pvlib'), any(m in sys.modules for m in "
    "('pvlib.spectrum', 'pvlib.modelchain', 'scipy.integrate')))\n"
    "print(physics.pvlib.pvsystem.PVSystem.__name__, type(physics.pvlib).__name__)")


def test_the_pvlib_modules_in_use_load_without_pvlib_s_init():
    """pvlib's __init__ loads all its modules (scipy's integration with them): the modules the
    physics, the model and the detectors use load alone, and anything else still loads."""
    out = subprocess.run([sys.executable, "-c", PVLIB_USED], capture_output=True, text=True,
                         check=True, cwd=ROOT)
    assert out.stdout.splitlines() == ["_Package True False", "PVSystem module"], out.stdout


def test_sql_files_are_found_and_every_schema_runs(tmp_path):
    con = db.connect(tmp_path / "x.duckdb")
    tables = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()}
    views = {r[0] for r in con.execute("SELECT view_name FROM duckdb_views()").fetchall()}
    assert {"source_files", "readings", "quarantine", "conflicts"} <= tables | views
    assert db.schema_names() == sorted(db.schema_names())


def test_schema_runs_again_only_when_its_text_changed(tmp_path, monkeypatch):
    # an up-to-date database skips the schema files (their digest is stored); a changed text
    # runs them again and stores the new digest (common practice: a schema version stamp)
    db.connect(tmp_path / "x.duckdb").close()
    read = []
    sql = db.sql
    monkeypatch.setattr(db, "sql", lambda name: read.append(name) or sql(name))
    con = db.connect(tmp_path / "x.duckdb")
    assert read == []
    con.close()
    monkeypatch.setattr(db, "schema_digest", lambda: "changed")
    con = db.connect(tmp_path / "x.duckdb")
    assert read == db.schema_names()
    assert con.execute("SELECT digest FROM schema_state").fetchall() == [("changed",)]


def test_user_names_are_quoted_as_identifiers():
    assert db.quote_ident('P "WR1"') == '"P ""WR1"""'


@pytest.mark.skipif(importlib.util.find_spec("ruff") is None, reason="ruff not installed")
def test_lint_clean():
    out = subprocess.run([sys.executable, "-m", "ruff", "check", "perfcheck", "tests"], cwd=ROOT,
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stdout + out.stderr
