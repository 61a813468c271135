import yaml, copy
from hypothesis import given, settings, HealthCheck, strategies as st
from harness.errors import InputError
from harness.suite import parse_suite
import test_fuzz_suite as F

@settings(max_examples=3000, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.sampled_from(["expect", "tolerances"]), F.values)
def test_blocks(key, value):
    doc = copy.deepcopy(F.VALID); doc[key] = value
    try:
        parse_suite(yaml.safe_dump(doc), "fuzz.yaml")
    except InputError as err:
        assert "\n" not in str(err)

ENTRY = st.dictionaries(st.sampled_from(["dataset","method","params","measure","at_least","at_most","x"]),
                        st.one_of(F.values, st.sampled_from(["stress","trustworthiness@5","trustworthiness@","roll","pca",0.5])), max_size=5)
@settings(max_examples=3000, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.lists(ENTRY, max_size=3))
def test_expect_entries(items):
    doc = copy.deepcopy(F.VALID); doc["expect"] = items
    try:
        parse_suite(yaml.safe_dump(doc), "fuzz.yaml")
    except InputError as err:
        assert "\n" not in str(err)
