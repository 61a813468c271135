"""Suite files: YAML in, a validated :class:`Suite` value out.

Validation happens here, once, before anything runs.  Every problem is an
:class:`~harness.errors.InputError` naming the file, the path inside it
(``methods[1].grid.perplexity[2]``) and what was expected.  Parsing has no
side effects: it reads the text and, for plug-in methods, asks the plug-in
loader to import them (from the installed packages, the working folder and
the suite's folder, for the duration of that import only).
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from ..config import MAX_SUITE_BYTES
from ..errors import InputError
from ..text import show
from . import _sections as sections
from ._read import integer, mapping, no_unknown, parse_size, plain_name
from ._yaml import read_yaml
from .data import load_datasets
from .expect import Expectation, parse_expectations
from .model import DatasetEntry, MethodEntry, Suite
from .tolerances import Tolerance, parse_tolerances

__all__ = [
    "DatasetEntry",
    "Expectation",
    "MethodEntry",
    "Suite",
    "Tolerance",
    "load_datasets",
    "load_suite",
    "parse_size",
    "parse_suite",
]

_SUITE_KEYS = (
    "name",
    "description",
    "seeds",
    "dimensions",
    "datasets",
    "methods",
    "measures",
    "run",
    "expect",
    "tolerances",
    "holdout",
)


def _document(doc: Any) -> Mapping[str, Any]:
    if not isinstance(doc, Mapping):
        raise InputError("", f"expected a mapping with keys name, datasets, methods, ...; got {show(doc)}")
    doc = mapping(doc, "", "a suite")
    no_unknown(doc, _SUITE_KEYS, "")
    for required in ("name", "datasets", "methods"):
        if required not in doc:
            raise InputError(required, "missing: every suite needs name, datasets and methods")
    if not isinstance(doc.get("description", ""), str):
        raise InputError("description", f"expected text, got {show(doc['description'])}")
    return doc


def parse_suite(text: str, path: str = "<suite>", *, resolve_plugins: bool = True) -> Suite:
    """Validate suite text (YAML) and return a :class:`Suite`.

    Parameters
    ----------
    text : str
        The YAML document.
    path : str
        Name of the file, used in messages and to resolve relative data paths.
    resolve_plugins : bool
        Import plug-in methods to check their parameters.  Reading a finished
        run folder passes false, so that it never runs plug-in code.

    Returns
    -------
    Suite

    Raises
    ------
    InputError
        On the first problem found, naming the file and the path inside it.
    """
    label = Path(path).name
    base = Path(path).resolve().parent if path != "<suite>" else Path.cwd()
    roots = tuple(dict.fromkeys([str(Path.cwd()), str(base)]))
    try:
        doc = _document(read_yaml(text))
        share = sections.holdout(doc.get("holdout"), "holdout")
        datasets = sections.dataset_entries(doc["datasets"], "datasets", base, share)
        methods = sections.method_entries(
            doc["methods"], "methods", roots, resolve_plugins=resolve_plugins, base=base
        )
        scoring = sections.scoring(doc.get("measures"), "measures")
        expect = parse_expectations(
            doc.get("expect") or [],
            "expect",
            datasets=[d.name for d in datasets],
            methods=[m.name for m in methods],
            ks=scoring.ks,
        )
        seeds = sections.seeds(doc.get("seeds"), "seeds")
        sections.cell_count(datasets, methods, seeds)
        return Suite(
            name=plain_name(doc["name"], "name"),
            description=doc.get("description", ""),
            seeds=seeds,
            dimensions=integer(doc.get("dimensions", 2), "dimensions", low=1),
            datasets=datasets,
            methods=methods,
            scoring=scoring,
            run=sections.run_settings(doc.get("run"), "run"),
            expect=expect,
            tolerances=parse_tolerances(doc.get("tolerances") or {}, "tolerances"),
            path=str(path),
            text=text,
            plugin_roots=roots,
        )
    except InputError as err:
        raise InputError(f"{label}: {err.where}" if err.where else label, err.expected) from None


def load_suite(path: str | Path) -> Suite:
    """Read and validate a suite file.

    Parameters
    ----------
    path : str or Path
        The YAML file.

    Returns
    -------
    Suite
    """
    p = Path(path)
    try:
        with p.open("rb") as fh:
            raw = fh.read(MAX_SUITE_BYTES + 1)
        if len(raw) > MAX_SUITE_BYTES:
            raise InputError(
                str(p), f"expected a suite of at most {MAX_SUITE_BYTES:,} bytes; this file is longer"
            )
        text = raw.decode("utf-8")
    except FileNotFoundError:
        raise InputError(str(p), "no such file: expected a suite (YAML)") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(str(p), f"cannot read the suite ({exc.__class__.__name__}: {exc})") from None
    return parse_suite(text, str(p))
