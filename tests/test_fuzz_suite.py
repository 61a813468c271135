"""Random YAML documents and mutations of a valid suite: a Suite or a clean InputError, never a crash.

Property-based testing of our own loader (hypothesis); the invariant is ours: every
outcome is a validated suite or one line of InputError.
"""

from __future__ import annotations

import re

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from harness.errors import InputError
from harness.suite import Suite, load_datasets, parse_suite

#: The top-level keys a suite may have (the suite format); every field path starts with one.
SUITE_KEYS = {
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
}

VALID = {
    "name": "fuzz",
    "seeds": 2,
    "dimensions": 2,
    "datasets": [
        {"use": "iris"},
        {"use": "rolled_sheet", "name": "roll", "params": {"n": 120, "noise": 0.1}},
    ],
    "methods": [
        {"use": "pca"},
        {"use": "tsne", "grid": {"perplexity": [5, 10]}},
        {"use": "isomap", "params": {"n_neighbors": 8}},
    ],
    "measures": {"k": [5, 10], "rank_by": ["trustworthiness", "stress"]},
    "run": {"time_limit": 30},
}

scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-(10**6), 10**6),
    st.floats(allow_nan=True),
    st.text(max_size=12),
    st.sampled_from(["iris", "pca", "tsne", "../x", "a:b", "1e9", "-1"]),
)
values = st.recursive(
    scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=4), st.dictionaries(st.text(max_size=10), inner, max_size=4)
    ),
    max_leaves=12,
)

KEYS = [
    "name",
    "seeds",
    "dimensions",
    "datasets",
    "methods",
    "measures",
    "run",
    "use",
    "params",
    "grid",
    "k",
    "rank_by",
    "n",
    "noise",
    "perplexity",
    "n_neighbors",
    "time_limit",
    "expect",
    "tolerances",
]


#: Complaints about the document as a whole: the only ones allowed to name the file without a field.
WHOLE_DOCUMENT = ("expected a mapping with keys", "expected text keys", "expected valid YAML")
#: Where a YAML syntax error is: a position in the file stands for the field.
POSITION = re.compile(r"line \d+, column \d+")


def _outcome(text: str) -> None:
    try:
        suite = parse_suite(text, "fuzz.yaml")
        assert isinstance(suite, Suite)
        load_datasets(suite)
    except InputError as err:
        message = str(err)
        assert "\n" not in message
        # "fuzz.yaml: <field>: <what was expected>": the file first, then the field, then the rest
        assert message == f"{err.where}: {err.expected}", message
        assert err.where.startswith("fuzz.yaml"), message
        field = err.where.removeprefix("fuzz.yaml").removeprefix(": ")
        if not field:
            assert err.expected.startswith(WHOLE_DOCUMENT), message
        elif not POSITION.fullmatch(field):
            head = re.match(r"[^.\[]*", field).group(0)
            # a key of the suite, or the unknown key the message is about
            assert head in SUITE_KEYS or err.expected.startswith("unknown key"), message
        assert err.expected, message


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.text(max_size=200))
def test_random_text(text):
    _outcome(text)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(values)
def test_random_documents(doc):
    _outcome(yaml.safe_dump(doc))


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, (*prefix, i))


PATHS = list(_paths(VALID))[1:]


def _set(doc, path, value):
    import copy

    doc = copy.deepcopy(doc)
    node = doc
    for step in path[:-1]:
        node = node[step]
    node[path[-1]] = value
    return doc


def _rename(doc, path, new_key):
    import copy

    doc = copy.deepcopy(doc)
    node = doc
    for step in path[:-1]:
        node = node[step]
    if isinstance(node, dict):
        node[new_key] = node.pop(path[-1])
    return doc


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.sampled_from(PATHS), values, st.sampled_from(["replace", "rename", "delete"]), st.sampled_from(KEYS)
)
def test_mutations_of_a_valid_suite(path, value, how, key):
    if how == "replace":
        doc = _set(VALID, path, value)
    elif how == "rename":
        doc = _rename(VALID, path, key)
    else:
        import copy

        doc = copy.deepcopy(VALID)
        node = doc
        for step in path[:-1]:
            node = node[step]
        del node[path[-1]]
    _outcome(yaml.safe_dump(doc))
