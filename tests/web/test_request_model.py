"""One request model for an analysis's options, shared by the JSON API and the dataset page's form.

The form sends text and the API sends JSON; both end in :class:`pairlens.web.models.AnalysisRequest`,
so the same options give the same settings and the same mistake gets the same words.
"""

from __future__ import annotations

import pytest
from pydantic import ValidationError
from starlette.datastructures import FormData

from pairlens.plan import AnalysisSettings
from pairlens.web.models import ORDERED_FILE, AnalysisRequest, describe_errors, validation_message

COLUMNS = ["alpha", "beta", "gamma"]


def _form(**fields) -> FormData:
    items = []
    for key, value in fields.items():
        for v in (value if isinstance(value, list) else [value]):
            items.append((key.replace("_", "-") if key.startswith("kind_") else key, v))
    return FormData(items)


def _settings(request: AnalysisRequest) -> AnalysisSettings:
    return AnalysisSettings.from_options(**request.options())


def test_form_and_json_give_the_same_settings():
    form = _form(measures=["pearson", "dcor"], columns=["alpha", "beta"], missing="complete", confidence="0.9",
                 permutations="199", seed="7", tests="pearson=t", ordered=ORDERED_FILE, given=["gamma"])
    json_body = {"measures": ["pearson", "dcor"], "columns": ["alpha", "beta"], "missing": "complete",
                 "confidence": 0.9, "permutations": 199, "seed": 7, "tests": ["pearson=t"], "ordered": True,
                 "given": ["gamma"]}
    from_form = _settings(AnalysisRequest.from_form(form, COLUMNS))
    from_json = _settings(AnalysisRequest.model_validate(json_body))
    assert from_form == from_json
    assert from_form.confidence == 0.9 and from_form.permutations == 199 and from_form.ordered == ""


def test_form_with_every_column_ticked_means_all_columns():
    request = AnalysisRequest.from_form(_form(measures="pearson", columns=COLUMNS), COLUMNS)
    assert request.columns is None


def test_json_is_not_coerced():
    # 2.7 or true is not a number of permutations, "0.9" is not a confidence (the API's contract)
    for body in ({"permutations": 2.7}, {"permutations": True}, {"confidence": "0.9"}, {"seed": float("inf")},
                 {"confidence": float("nan")}, {"measures": [1]}):
        with pytest.raises(ValidationError):
            AnalysisRequest.model_validate(body)


def test_unknown_option_is_named_with_the_known_ones():
    with pytest.raises(ValidationError) as caught:
        AnalysisRequest.model_validate({"colour": "red"})
    text = validation_message(caught.value, {"colour": "red"})
    assert text.startswith("colour: unknown option") and "measures" in text and "given" in text


@pytest.mark.parametrize("field, text", [("confidence", "abc"), ("permutations", "many"), ("seed", "1.5")])
def test_form_number_that_is_not_a_number_names_the_field(field, text):
    with pytest.raises(ValidationError) as caught:
        AnalysisRequest.from_form(_form(measures="pearson", **{field: text}), COLUMNS)
    message = validation_message(caught.value, {field: text})
    assert message.startswith(f"{field}: must be ") and f'"{text}"' in message


def test_union_field_is_described_once():
    with pytest.raises(ValidationError) as caught:
        AnalysisRequest.model_validate({"measures": [1, 2]})
    errors = [e | {"loc": ("body", *e["loc"])} for e in caught.value.errors()]
    assert len(errors) > 1  # pydantic reports each branch of str | list[str] ...
    message = describe_errors(errors, {"measures": [1, 2]})
    assert message.count("measures") == 1  # ... the client reads the field once
