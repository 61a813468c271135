"""Commands about suites and what they may name: ``validate``, ``init``, ``list``."""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

from ._base import EXIT_OK, Command

if TYPE_CHECKING:
    from ..methods import MethodSpec


def _validate_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("suite", help="suite file (YAML)")


def _validate(args: argparse.Namespace) -> int:
    from ..run import plan
    from ..suite import load_datasets, load_suite

    suite = load_suite(args.suite)
    datasets = load_datasets(suite)
    cells, refused = plan(suite, datasets)
    sizes = ", ".join(f"{n} ({d.n} x {d.n_features or 'distances'})" for n, d in datasets.items())
    print(
        f"{args.suite}: valid. {len(suite.datasets)} datasets: {sizes}; {len(suite.methods)} methods; "
        f"{len(suite.seeds)} seeds; {len(cells)} cells to run"
        + (f", {len(refused)} refused" if refused else "")
    )
    for r in {(r.cell.dataset, r.cell.method): r for r in refused}.values():
        print(f"  refused: {r.cell.method} on {r.cell.dataset}: {r.error}")
    return EXIT_OK


def _init_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("path", nargs="?", default="suite.yaml", help="where to write it (default: suite.yaml)")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")


def _init(args: argparse.Namespace) -> int:
    from ..suite.starter import write_starter

    path = write_starter(args.path, force=args.force)
    print(f"wrote {path}; edit it, then: foldbench validate {path} && foldbench run {path}")
    return EXIT_OK


def _list_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("what", choices=["datasets", "methods", "measures"])


def _method_tags(spec: MethodSpec) -> str:
    tags: list[str] = [spec.family]
    if spec.accepts_distances:
        tags.append("takes distances")
    if spec.places_new_points:
        tags.append("places new points")
    missing = spec.missing_package()
    if missing is not None:
        tags.append(f"not installed: pip install 'foldbench[methods]' ({missing})")
    return f"  [{'; '.join(tags)}]"


def _list(args: argparse.Namespace) -> int:
    from ..datasets import DATASETS
    from ..methods import METHODS
    from ..metrics import MEASURES

    if args.what == "measures":
        for m in MEASURES.values():
            direction = "higher is better" if m.higher_is_better else "lower is better"
            k = ", at each k" if m.per_k else (f", and {m.name}@k at each k" if m.at_k_too else "")
            needs = f", needs {m.needs}" if m.needs else ""
            print(f"{m.name}  [{m.scope}; {direction}{k}{needs}]\n    {m.definition}\n    source: {m.source}")
        return EXIT_OK
    entries = [(spec.name, "", spec.description, spec.params) for spec in DATASETS.values()]
    if args.what == "methods":
        from ..methods.plugins import entry_point_names

        entries = [(s.name, _method_tags(s), s.description, s.params) for s in METHODS.values()]
        entries += [
            (name, "  [plug-in]", "installed through the 'foldbench.methods' entry-point group", ())
            for name in entry_point_names()
            if name not in METHODS
        ]
    for name, extra, description, params in entries:
        print(f"{name}{extra}\n    {description}")
        for p in params:
            if p.default is None:
                default = "required" if p.name == "path" else "default: not set"
            else:
                default = f"default {p.default!r}"
            choices = f"; one of {', '.join(map(str, p.choices))}" if p.choices else ""
            print(f"    - {p.name} ({p.type_name()}, {default}{choices}): {p.doc}")
    return EXIT_OK


COMMANDS = [
    Command(
        "validate", "check a suite and its data without running anything", _validate_arguments, _validate
    ),
    Command("list", "show the datasets, methods or measures foldbench knows", _list_arguments, _list),
    Command("init", "write a commented starter suite to edit", _init_arguments, _init),
]
