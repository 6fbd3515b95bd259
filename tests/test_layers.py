"""The package's imports go one way: from the physics up to the command line, lazy imports included.

The import graph is built from the source (every ``import`` statement, those inside functions too, by
walking each module's syntax tree), so it sees what a run actually imports, not only what is imported
when the package loads. Layers, lowest first (a module may import its own layer and those below):

core -> snapshot and readers -> transfer -> result -> observe, analysis, comparison, interferometer, files
-> plot -> run (jobs, planning, engine, products, colour scales, batch, manifest, demo) -> cli

Package ``__init__`` modules re-export and are left out as importers (importing one counts as importing its
package). The graph may hold no cycle and no upward import, except ``CONVENIENCES``: methods of a product
object that hand it to a layer above (``Result.observe``, ``Result.write_fits``, ``Cut.plot``), as a data
object of a general analysis library offers its plots. They are allowed for good, but only as imports inside
a function body, so that loading a lower layer never loads a higher one; each entry says which methods it
serves. An entry that the code no longer has fails the test too, so that the list stays true.
"""

import ast
import pathlib

ROOT = pathlib.Path(__file__).resolve().parents[1] / "rtrace"

LAYERS = [
    (
        "core",
        [
            "rtrace._version",
            "rtrace.errors",
            "rtrace.quantities",
            "rtrace.memory",
            "rtrace.compiling",
            "rtrace.physics",
        ],
    ),
    (
        "snapshot",
        [
            "rtrace.gas",
            "rtrace.snapshot",
            "rtrace.amr",
            "rtrace.io.hdf5",
            "rtrace.io.lazy",
            "rtrace.io.ytdata",
            "rtrace.io.atomic",
            "rtrace.io.outdir",
            "rtrace.io.tables",
        ],
    ),
    ("transfer", ["rtrace.transfer"]),
    ("result", ["rtrace.transfer.result", "rtrace.transfer.high_level"]),
    ("products", ["rtrace.observe", "rtrace.analysis", "rtrace.comparison", "rtrace.interferometer", "rtrace.io.fits"]),
    ("plot", ["rtrace.plot"]),
    ("run", ["rtrace.run", "rtrace.demo"]),
    ("cli", ["rtrace.cli"]),
]

# (importer, imported): methods of a product object that hand it to a layer above (see the docstring)
CONVENIENCES = {
    ("rtrace.transfer.result", "rtrace.analysis.cuts"): "Result.cut",
    ("rtrace.transfer.result", "rtrace.analysis.depth"): "Result.tau_unity_depth, Result.contribution",
    ("rtrace.transfer.result", "rtrace.analysis.spectra"): "Result.turnover_frequency",
    ("rtrace.transfer.result", "rtrace.observe"): "Result.observe",
    ("rtrace.transfer.result", "rtrace.io.fits"): "Result.write_fits",
    ("rtrace.analysis.cuts", "rtrace.plot.cuts"): "Cut.plot",
    ("rtrace.comparison.core", "rtrace.plot.comparison"): "Comparison.figure, Comparison.plot",
}


def _modules():
    mods = {}
    for path in ROOT.rglob("*.py"):
        parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
        init = parts[-1] == "__init__"
        mods[".".join(parts[:-1] if init else parts)] = (path, init)
    return mods


def _nodes_with_depth(tree):
    """Every node of ``tree`` with whether it sits inside a function body."""
    todo = [(tree, False)]
    while todo:
        node, inside = todo.pop()
        yield node, inside
        nested = inside or isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda))
        todo.extend((child, nested) for child in ast.iter_child_nodes(node))


def _imports(mods, lazy_only=None):
    """``{module: {imported rtrace module, ...}}`` from every import statement of every module.

    With ``lazy_only`` (a dict), it is filled with ``{(module, imported): True}`` where every import of
    that pair sits inside a function body, False where one is at module level.
    """
    edges = {}
    for name, (path, init) in mods.items():
        package = name.split(".") if init else name.split(".")[:-1]
        found = set()
        for node, inside in _nodes_with_depth(ast.parse(path.read_text())):
            targets = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    up = package[: len(package) - (node.level - 1)]
                    base = ".".join(up + ([node.module] if node.module else []))
                targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in mods else base for a in node.names]
            for target in targets:
                while target not in mods and "." in target:
                    target = target.rsplit(".", 1)[0]
                if target.startswith("rtrace") and target in mods and target != name:
                    found.add(target)
                    if lazy_only is not None:
                        lazy_only[(name, target)] = lazy_only.get((name, target), True) and inside
        edges[name] = found
    return edges


def _layer(name):
    best = None
    for level, (_, prefixes) in enumerate(LAYERS):
        for prefix in prefixes:
            if (name == prefix or name.startswith(prefix + ".")) and (best is None or len(prefix) > best[1]):
                best = (level, len(prefix))
    return None if best is None else best[0]


def test_every_module_has_a_layer():
    unplaced = sorted(m for m, (_, init) in _modules().items() if not init and _layer(m) is None)
    assert not unplaced, f"modules without a layer in LAYERS: {unplaced}"


def test_imports_go_one_way():
    mods = _modules()
    upward, lazy = set(), {}
    for name, targets in _imports(mods, lazy).items():
        if mods[name][1]:
            continue  # package __init__: re-exports
        for target in targets:
            if target == "rtrace":
                upward.add((name, target))  # the package root re-exports everything
            elif _layer(target) > _layer(name):  # a package's __init__ counts as the package
                upward.add((name, target))
            elif name == "rtrace.snapshot" and target.startswith("rtrace.io."):
                upward.add((name, target))  # the data model does not import its readers
    allowed = set(CONVENIENCES)
    new = sorted(upward - allowed)
    gone = sorted(allowed - upward)
    eager = sorted(pair for pair in CONVENIENCES if pair in upward and not lazy[pair])
    assert not new, f"imports against the layering (a lower layer importing a higher one): {new}"
    assert not gone, f"removed from the code, so remove them from CONVENIENCES too: {gone}"
    assert not eager, f"convenience imports must sit inside the method that needs them: {eager}"


def test_no_import_cycles_beyond_the_known_ones():
    # Tarjan's strongly connected components (Tarjan 1972, SIAM J. Comput. 1, 146) on the graph without
    # package __init__ targets and without the listed upward imports: what is left must be acyclic
    mods = _modules()
    allowed = set(CONVENIENCES)
    edges = {
        m: {t for t in ts if not mods[t][1] and (m, t) not in allowed}
        for m, ts in _imports(mods).items()
        if not mods[m][1]
    }
    index, low, stack, on_stack, cycles, counter = {}, {}, [], set(), [], [0]

    def strong(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on_stack.add(v)
        for w in sorted(edges.get(v, ())):
            if w not in index:
                strong(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                cycles.append(sorted(component))

    for v in sorted(edges):
        if v not in index:
            strong(v)
    assert not cycles, f"import cycles: {cycles}"


def test_no_module_takes_a_private_name_from_another_package():
    # a leading underscore marks a name as its own package's business: another package that needs it gets a
    # public name (as plot's internal API in rtrace/plot/core.py, or the parsers in rtrace/quantities.py)
    found = []
    for name, (path, init) in _modules().items():
        package = name.split(".") if init else name.split(".")[:-1]
        for node in ast.walk(ast.parse(path.read_text())):
            if not isinstance(node, ast.ImportFrom):
                continue
            base = node.module or ""
            if node.level:
                base = ".".join(package[: len(package) - (node.level - 1)] + ([node.module] if node.module else []))
            if not base.startswith("rtrace"):
                continue
            source_package = base if base in _modules() and _modules()[base][1] else base.rsplit(".", 1)[0]
            private = [a.name for a in node.names if a.name.startswith("_") and not a.name.startswith("__")]
            if private and source_package != ".".join(package):
                found.append(f"{name}: {base} {private}")
    assert not found, "private names imported across packages:\n" + "\n".join(found)
