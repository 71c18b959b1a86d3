"""Package boundaries, checked on the source with ``ast`` (issue 14, items 4 and 1).

These are project rules, not facts from an outside source: ``link_sim`` and the
scripts in ``tools/`` use only the codec's public API (``codec``'s ``__all__``
and the public module ``codec.cli.common``); ``codec`` never imports
``link_sim``; no module-level import cycle inside ``codec`` or ``link_sim``.
Each scanner is also run on a small synthetic source, so a scanner that finds
nothing because it is broken fails too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

#: Imports of another package's underscore modules that stay on purpose, as
#: ``(file, imported module)``.  Each one measures or fits an internal stage
#: directly, where the public API would hide what is measured.
ALLOWED_PRIVATE = {
    # Forges frames around the envelope parser: it needs the raw extent rule that
    # the frame search uses, before any CRC check (not a user's operation).
    ("tools/fuzz_decode.py", "codec.layouts.envelope"),
    # Fits the range coder's probability tables: it runs term selection and the
    # trellis stage by stage and reads the coder's model parameters.
    ("tools/fit_range_model.py", "codec.entropy.rangecoder"),
    # (as_basis is public now; this file was off limits in the change that exported it)
    ("tools/fit_range_model.py", "codec.transform.bases"),
    ("tools/fit_range_model.py", "codec.quantize.select"),
    ("tools/fit_range_model.py", "codec.quantize.trellis"),
    # Measures where the coefficient coder's bits go: the selection stage and the
    # coder's ideal code lengths, each on its own.
    ("tools/rate_losses.py", "codec.entropy.rangecoder"),
    ("tools/rate_losses.py", "codec.quantize.select"),
    # Splits the bits of real recordings by coder stage (Exp-Golomb vs range
    # model costs of parsed layout-3 to 6 frames, layout 5's lag fields; whether a
    # layout-6 frame carries the basis field) and draws profiles as `init` does.
    ("tools/bench_real.py", "codec._infer"),
    ("tools/bench_real.py", "codec.entropy.rice"),
    ("tools/bench_real.py", "codec.layouts.v3"),
    ("tools/bench_real.py", "codec.entropy.rangecoder"),
    ("tools/bench_real.py", "codec.transform.predict"),
    ("tools/bench_real.py", "codec.transform.bases"),
}

#: Module-level import cycles that exist today, each as the sorted tuple of its
#: modules.  None: the encoder (``codec.encoder``) imports nothing of the decoder;
#: whole-stream ``decode`` lives in ``codec.stream.decode``, on top of
#: ``codec.stream.live`` and ``codec.stream.frames`` (issue 14 item 2).
KNOWN_CYCLES: set[tuple[str, ...]] = set()

PACKAGES = ("codec", "link_sim")


def _py_files(folder: str) -> list[Path]:
    return sorted((ROOT / folder).rglob("*.py"))


def _module_name(path: Path) -> str:
    """``codec/cli/common.py`` -> ``codec.cli.common``; ``codec/__init__.py`` -> ``codec``."""
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _is_type_checking(node: ast.If) -> bool:
    t = node.test
    return (isinstance(t, ast.Name) and t.id == "TYPE_CHECKING") or (
        isinstance(t, ast.Attribute) and t.attr == "TYPE_CHECKING")


def _top_level_imports(tree: ast.Module) -> list[ast.Import | ast.ImportFrom]:
    """Imports run when the module is imported: module body, ``if`` and ``try`` blocks.

    Function bodies (deferred imports) and ``if TYPE_CHECKING:`` blocks are left out.
    """
    found: list = []

    def walk(body: list[ast.stmt]) -> None:
        for node in body:
            if isinstance(node, ast.Import | ast.ImportFrom):
                found.append(node)
            elif isinstance(node, ast.If):
                if not _is_type_checking(node):
                    walk(node.body)
                walk(node.orelse)
            elif isinstance(node, ast.Try):
                for block in (node.body, node.orelse, node.finalbody,
                              *(h.body for h in node.handlers)):
                    walk(block)
            elif isinstance(node, ast.With):
                walk(node.body)

    walk(tree.body)
    return found


def _imported(node: ast.Import | ast.ImportFrom, module: str, is_package: bool) -> list[str]:
    """Absolute dotted names an import statement in ``module`` brings in.

    ``from X import y`` gives both ``X`` and ``X.y`` (``y`` may be a submodule or a
    private name; both count).
    """
    if isinstance(node, ast.Import):
        return [a.name for a in node.names]
    if node.level:
        base = module.split(".") if is_package else module.split(".")[:-1]
        base = base[: len(base) - (node.level - 1)]
        pkg = ".".join(base + ([node.module] if node.module else []))
    else:
        pkg = node.module or ""
    return [pkg] + [f"{pkg}.{a.name}" for a in node.names if a.name != "*"]


#: The modules of a package that other packages may import: the package itself
#: (its ``__all__``), and the command-line helpers shared by commands of both packages.
PUBLIC_MODULES = {"codec", "codec.cli", "codec.cli.common", "link_sim"}


def private_imports(source: str, home: str | None) -> list[str]:
    """Every import in ``source`` (all of it, deferred ones too) of a module of a
    package other than ``home`` that is not one of ``PUBLIC_MODULES`` (e.g.
    ``codec.stream.search``), or of an underscore name from a public one."""
    bad = []
    for node in ast.walk(ast.parse(source)):
        if not isinstance(node, ast.Import | ast.ImportFrom) or getattr(node, "level", 0):
            continue  # relative imports stay inside their own package
        if isinstance(node, ast.Import):
            pairs = [(a.name, None) for a in node.names]
        else:
            pairs = [(node.module or "", a.name) for a in node.names]
        for module, name in pairs:
            if module.split(".")[0] not in PACKAGES or module.split(".")[0] == home:
                continue
            if module not in PUBLIC_MODULES:
                bad.append(module)
            elif name and name.startswith("_"):
                bad.append(f"{module}.{name}")
    return list(dict.fromkeys(bad))


def _scan_private(folder: str) -> set[tuple[str, str]]:
    found = set()
    for path in _py_files(folder):
        home = folder if folder in PACKAGES else None
        for module in private_imports(path.read_text(encoding="utf-8"), home):
            found.add((str(path.relative_to(ROOT)), module))
    return found


def test_scanner_flags_private_imports_of_another_package():
    src = ("import codec\nfrom codec import encode\nfrom codec.stream.search import locate_frames\n"
           "from codec.cli import common\nimport codec.cli._codec_cmds\n"
           "from codec import _range as R\nfrom . import _fec\nfrom link_sim._fec import x\n"
           "from codec.layouts import v1\n"
           "def f():\n    from codec._io import is_stdio\n")
    assert private_imports(src, "link_sim") == [
        "codec.stream.search", "codec.cli._codec_cmds", "codec._range", "codec.layouts",
        "codec._io"]
    assert "link_sim._fec" in private_imports(src, None)


@pytest.mark.parametrize("folder", ["link_sim", "tools"])
def test_no_private_imports_across_packages(folder):
    found = _scan_private(folder)
    unexpected = sorted(found - ALLOWED_PRIVATE)
    assert not unexpected, (f"{folder} imports private modules of another package: "
                            f"{unexpected}; export the names from the package's __init__")


def test_exception_list_is_current():
    # An entry no file needs any more must go, so the list stays the true exceptions.
    found = _scan_private("tools") | _scan_private("link_sim")
    assert ALLOWED_PRIVATE <= found, sorted(ALLOWED_PRIVATE - found)


def test_exceptions_name_real_modules():
    for file, module in ALLOWED_PRIVATE:
        assert (ROOT / file).is_file(), file
        assert (ROOT / (module.replace(".", "/") + ".py")).is_file(), module


def _imports_link_sim(source: str) -> bool:
    return any(n.split(".")[0] == "link_sim"
               for node in ast.walk(ast.parse(source))
               if isinstance(node, ast.Import | ast.ImportFrom) and not getattr(node, "level", 0)
               for n in _imported(node, "", False))


def test_codec_never_imports_link_sim():
    # the scanner itself: deferred imports count too
    assert _imports_link_sim("def f():\n    from link_sim import simulate\n")
    assert not _imports_link_sim("import codec\nfrom . import _io\n")
    offenders = [str(p.relative_to(ROOT)) for p in _py_files("codec")
                 if _imports_link_sim(p.read_text(encoding="utf-8"))]
    assert not offenders, offenders


def import_graph(sources: dict[str, tuple[str, bool]]) -> dict[str, set[str]]:
    """``{module: modules of the same set it imports at module level}``.

    ``sources`` maps a module name to ``(source, is_package)``.
    """
    graph: dict[str, set[str]] = {}
    for mod, (src, is_pkg) in sources.items():
        edges = set()
        for node in _top_level_imports(ast.parse(src)):
            for name in _imported(node, mod, is_pkg):
                if name in sources and name != mod:
                    edges.add(name)
        graph[mod] = edges
    return graph


def cycles(graph: dict[str, set[str]]) -> set[tuple[str, ...]]:
    """The strongly connected components of more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: set[tuple[str, ...]] = set()

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.add(tuple(sorted(comp)))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_cycle_search_finds_a_synthetic_cycle():
    sources = {
        "p": ("", True),
        "p._a": ("from ._b import x\n", False),
        "p._b": ("from . import _c\nimport os\n", False),
        "p._c": ("from p._a import y\n", False),
        "p._d": ("from ._a import y\ndef f():\n    from ._d2 import z\n", False),
        "p._d2": ("from ._d import w\n", False),  # only a deferred import back: no cycle
        "p._e": ("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from ._f import T\n",
                 False),
        "p._f": ("from ._e import g\n", False),
    }
    assert cycles(import_graph(sources)) == {("p._a", "p._b", "p._c")}


@pytest.mark.parametrize("package", PACKAGES)
def test_no_import_cycle_inside_package(package):
    sources = {_module_name(p): (p.read_text(encoding="utf-8"), p.name == "__init__.py")
               for p in _py_files(package)}
    found = cycles(import_graph(sources))
    assert found - KNOWN_CYCLES == set(), sorted(found - KNOWN_CYCLES)


def test_public_api_examples_run():
    # The Examples sections of names exported for other packages run as doctests
    # (Python's doctest module is the reference); attempted > 0 so an example that
    # vanishes fails here.
    import doctest

    import codec.stream.search

    result = doctest.testmod(codec.stream.search)
    assert result.attempted >= 5 and result.failed == 0, result


#: Longest function allowed in ``codec/``, in lines from its ``def`` to its end,
#: docstring included (issue 14's acceptance; a project rule, no outside source).
#: Generated table modules hold data, not functions.
MAX_FUNCTION_LINES = 80


def long_functions(source: str, limit: int = MAX_FUNCTION_LINES) -> list[str]:
    """``name (lines)`` of every function or method in ``source`` longer than ``limit``."""
    return [f"{node.name} ({node.end_lineno - node.lineno + 1})"
            for node in ast.walk(ast.parse(source))
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef)
            and node.end_lineno - node.lineno + 1 > limit]


def test_no_long_functions_in_codec():
    body = "    x = 1\n"
    assert long_functions("def f():\n" + body * 80) == ["f (81)"]  # the scanner works
    assert long_functions("def f():\n" + body * 79) == []
    assert long_functions("class A:\n    def g(self):\n" + "        x = 1\n" * 80) == ["g (81)"]
    found = {str(p.relative_to(ROOT)): long_functions(p.read_text(encoding="utf-8"))
             for p in _py_files("codec")}
    assert not {k: v for k, v in found.items() if v}, found
