"""The package's import structure: folders import only folders earlier in the data flow.

The order is the project's own rule (DEVELOPERS.md): core <- tables <- model
<- fit <- results <- report <- tools <- cli.  The check reads the source with
``ast`` and runs none of it.
"""

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "deepwell"
ORDER = ("core", "tables", "model", "fit", "results", "report", "tools", "cli")


def _module_name(path, root=PACKAGE.parent):
    parts = list(path.relative_to(root).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path, root=PACKAGE.parent):
    """(line, imported deepwell module, function-local?) for every import in ``path``."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    name = _module_name(path, root)
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    local = {id(n) for f in ast.walk(tree) if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef))
             for n in ast.walk(f)}
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            # "from pkg import sub" imports the submodule when one exists
            targets = []
            for a in node.names:
                sub = root / Path(*(mod + "." + a.name).split("."))
                targets.append(mod + "." + a.name if sub.with_suffix(".py").is_file()
                               or (sub / "__init__.py").is_file() else mod)
        else:
            continue
        out += [(node.lineno, t, id(node) in local) for t in targets
                if t == "deepwell" or t.startswith("deepwell.")]
    return out


def _folder(module):
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else None


def _sources():
    return sorted(PACKAGE.rglob("*.py"))


def test_every_module_lives_in_one_of_the_ordered_folders():
    loose = [p.name for p in PACKAGE.glob("*.py") if p.name != "__init__.py"]
    assert loose == []
    folders = sorted(p.name for p in PACKAGE.iterdir() if (p / "__init__.py").is_file())
    assert folders == sorted(ORDER)


def test_imports_point_only_to_earlier_folders():
    bad = []
    for path in _sources():
        src = _folder(_module_name(path))
        if src is None:
            continue  # deepwell/__init__.py: the library's face gathers from every folder
        for line, target, _ in _imports(path):
            dst = _folder(target)
            if dst is None:
                bad.append(f"{path.relative_to(PACKAGE)}:{line} imports the top package")
            elif ORDER.index(dst) > ORDER.index(src):
                bad.append(f"{path.relative_to(PACKAGE)}:{line} {src} -> {dst} ({target})")
    assert bad == []


def test_no_function_local_imports_of_deepwell_modules():
    # A lazy import of a heavy optional library (Dask) is allowed; of our own code it
    # could only hide a circle.
    bad = [f"{p.relative_to(PACKAGE)}:{line} {target}" for p in _sources()
           for line, target, local in _imports(p) if local]
    assert bad == []


def _cycles(graph):
    """Import cycles of ``graph`` (module -> modules it imports at load time).

    A module's own parent packages are left out: Python loads them first.
    """
    state, found = {}, []

    def visit(node, trail):
        state[node] = 1
        for dep in sorted(graph.get(node, ())):
            if dep not in graph or node.startswith(dep + "."):
                continue
            if state.get(dep) == 1:
                found.append(trail + [dep])
            elif dep not in state:
                visit(dep, trail + [dep])
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    return found


def test_module_import_graph_has_no_cycle():
    graph = {}
    for path in _sources():
        name = _module_name(path)
        deps = set()
        for _, target, local in _imports(path):
            if not local:
                parts = target.split(".")
                deps.update(".".join(parts[:k]) for k in range(2, len(parts) + 1))
        graph[name] = deps - {name}
    assert _cycles(graph) == []


def test_the_check_finds_backward_and_local_imports(tmp_path):
    # The checker itself, on a made-up tree: a model module importing the report
    # (relative import) and, inside a function, the fitter.
    probe = tmp_path / "deepwell" / "model" / "probe.py"
    probe.parent.mkdir(parents=True)
    (tmp_path / "deepwell" / "report").mkdir()
    (tmp_path / "deepwell" / "report" / "__init__.py").write_text("")
    probe.write_text("from ..report import write_report\n\n\ndef f():\n"
                     "    from deepwell.fit import fit_joint\n", encoding="utf-8")
    found = _imports(probe, root=tmp_path)
    assert [(t, local) for _, t, local in found] == [("deepwell.report", False),
                                                     ("deepwell.fit", True)]
    assert ORDER.index(_folder(found[0][1])) > ORDER.index("model")


def test_the_cycle_check_finds_a_cycle():
    graph = {"deepwell.a": {"deepwell.b"}, "deepwell.b": {"deepwell.c"},
             "deepwell.c": {"deepwell.a"}, "deepwell.a.x": {"deepwell.a"}}
    assert _cycles(graph) == [["deepwell.a", "deepwell.b", "deepwell.c", "deepwell.a"]]
