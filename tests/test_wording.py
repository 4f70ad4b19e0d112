"""Library messages name options by their library names; the command line spells them as flags.

Core modules never carry a front end's flag: they call ``reachlist.wording.option`` with the
library's parameter name, and the CLI speaks through its own spelling table while a command runs.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

from reachlist.cli import COMMANDS, main
from reachlist.cli.spelling import CLI_SPELLING
from reachlist.errors import InputError
from reachlist.planning import ListRequest, plan_list
from reachlist.sample import KEY_SKUS
from reachlist.warehouse import Warehouse
from reachlist.wording import option, spelled_as, spelling

PACKAGE = Path(__file__).parents[1] / "reachlist"
CORE = sorted(
    p
    for p in PACKAGE.rglob("*.py")
    if p.relative_to(PACKAGE).parts[0] not in ("cli", "render") and p.name != "wording.py"
)
FLAG = re.compile(r"(?<![\w-])--[a-z][a-z-]*[a-z]")


def _docstrings(tree: ast.AST) -> set[int]:
    """Strings standing alone as statements: docstrings of modules, classes, functions and
    attributes (documentation, not text a user sees)."""
    return {
        id(node.value)
        for node in ast.walk(tree)
        if isinstance(node, ast.Expr) and isinstance(node.value, ast.Constant)
    }


def _texts(path: Path) -> list[tuple[int, str]]:
    """Every string a module holds outside its docstrings (f-string parts included)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    skip = _docstrings(tree)
    return [
        (node.lineno, node.value)
        for node in ast.walk(tree)
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in skip
    ]


def _option_names() -> set[str]:
    names = set()
    for path in CORE:
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if (
                isinstance(node, ast.Call)
                and isinstance(node.func, ast.Name)
                and node.func.id == "option"
                and node.args
                and isinstance(node.args[0], ast.Constant)
            ):
                names.add(node.args[0].value)
    return names


def _cli_flags() -> set[str]:
    flags = {"--help", "--version"}
    for name in COMMANDS:
        command = main.get_command(click.Context(main), name)
        assert command is not None
        for param in command.params:
            flags.update(getattr(param, "opts", ()))
            flags.update(getattr(param, "secondary_opts", ()))
    return flags


@pytest.mark.parametrize("path", CORE, ids=lambda p: str(p.relative_to(PACKAGE)))
def test_core_modules_name_no_command_line_flag(path: Path) -> None:
    found = [(line, text) for line, text in _texts(path) if FLAG.search(text)]
    assert not found, f"{path.name} spells flags itself (use wording.option): {found}"


def test_every_option_the_library_names_has_a_command_line_spelling() -> None:
    missing = _option_names() - set(CLI_SPELLING)
    assert not missing, f"add these to reachlist/cli/spelling.py: {sorted(missing)}"


def test_every_spelling_is_a_real_flag() -> None:
    flags = _cli_flags()
    wrong = {k: v for k, v in CLI_SPELLING.items() if v not in flags}
    assert not wrong, f"spelled as flags no command has: {wrong}"


def test_spelling_holds_only_inside_its_block() -> None:
    assert option("horizon_days") == "horizon_days"
    with spelling({"horizon_days": "--horizon"}):
        assert option("horizon_days") == "--horizon"
    assert option("horizon_days") == "horizon_days"


def test_a_library_error_names_the_parameter_and_the_cli_the_flag(pristine: Path) -> None:
    mat = KEY_SKUS["heated_mat"]
    with Warehouse.open(pristine, read_only=True) as wh, pytest.raises(InputError) as caught:
        plan_list(wh, ListRequest(mat, horizon_days=0))
    assert "horizon_days" in str(caught.value) and "--horizon" not in str(caught.value)
    result = CliRunner().invoke(main, ["sizes", mat, "-w", str(pristine), "--horizon", "0"])
    assert result.exit_code == 2
    assert "--horizon" in result.output and "horizon_days" not in result.output


def test_a_caller_can_name_its_own_option_for_one_it_passes_on() -> None:
    with spelled_as("as_of", "cutoff"):
        assert option("as_of") == "cutoff"  # from Python: the caller's parameter
    with spelling(CLI_SPELLING), spelled_as("as_of", "cutoff"):
        assert option("as_of") == "--cutoff" and option("horizon_days") == "--horizon"
    with spelling(CLI_SPELLING):
        assert option("as_of") == "--until"  # and back after the block
    assert option("as_of") == "as_of"
