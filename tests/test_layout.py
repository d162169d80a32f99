"""The package layout: data flows one way through the pipeline's stages.

Each module may import from its own stage and from stages listed before it, never from a
later one; the check reads every ``from ptares... import`` and ``import ptares...`` with the
standard ``ast`` module.
"""

import ast
from pathlib import Path

import ptares

#: Stages in pipeline order; a module of one stage imports only from the same or earlier ones.
STAGES = [
    ("errors", "limits", "locking", "rng", "threads", "version"),
    ("physics",),
    ("dataset",),
    ("inputs",),
    ("simulation",),
    ("correlation",),
    ("forecast",),
    ("inference",),
    ("campaign",),
    ("figures",),
    ("report",),
    ("api",),
    ("cli", "__main__", "__init__"),
]
RANK = {name: rank for rank, names in enumerate(STAGES) for name in names}
ROOT = Path(ptares.__file__).parent


def stage_of(module: str) -> str:
    """``ptares.inference.model`` -> ``inference``; ``ptares`` itself is the package's ``__init__``."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def imports():
    for path in sorted(ROOT.rglob("*.py")):
        module = ".".join(("ptares",) + path.relative_to(ROOT).with_suffix("").parts)
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and node.module and node.module.split(".")[0] == "ptares":
                yield module, node.module, node.lineno
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name.split(".")[0] == "ptares":
                        yield module, alias.name, node.lineno
            elif isinstance(node, ast.ImportFrom) and node.level:
                raise AssertionError(f"{module}:{node.lineno}: relative import; write ptares.<stage>.<module>")


def test_every_top_level_module_has_a_stage():
    names = {p.stem if p.is_file() else p.name for p in ROOT.iterdir() if p.suffix == ".py" or (p / "__init__.py").exists()}
    assert names <= set(RANK), sorted(names - set(RANK))


def test_no_module_imports_from_a_later_stage():
    wrong = [f"{module}:{line} imports {target}" for module, target, line in imports()
             if RANK[stage_of(target)] > RANK[stage_of(module)]]
    assert not wrong, "\n".join(wrong)
