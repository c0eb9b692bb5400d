"""Attack the TOML readers (velocity-model files and survey files) with broken copies of
valid files, and with any value under any key.

Every mutant must give a valid result or a one-line SlicerError naming the file, and leave the
file as it was (see attack_kit).
"""

from __future__ import annotations

import pytest
from attack_kit import (
    SCALE,
    SURVEY_BLOCKS,
    SURVEY_INLINE,
    SURVEY_TABLE,
    VELOCITY_CONSTANT,
    VELOCITY_LATERAL,
    VELOCITY_LAYERED,
    VELOCITY_PERMITTIVITY,
    VELOCITY_RMS,
    attack,
    check_model,
    check_settings,
    failed,
    names_survey,
    toml_cases,
    write_survey_folder,
)
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from mutate import TOML_VALUES, Mutant

import slicer

MODELS = {"constant": VELOCITY_CONSTANT, "permittivity": VELOCITY_PERMITTIVITY,
          "layered": VELOCITY_LAYERED, "rms": VELOCITY_RMS, "lateral": VELOCITY_LATERAL}
SURVEYS = {"table": SURVEY_TABLE, "inline": SURVEY_INLINE, "blocks": SURVEY_BLOCKS}

MODEL_CASES = [c for name, text in MODELS.items()
               for c in toml_cases(f"model-{name}", text, 30)]
SURVEY_CASES = [c for name, text in SURVEYS.items()
                for c in toml_cases(f"survey-{name}", text, 40)]

#: Mutants that once failed (a TOML integer beyond any float raised OverflowError in the
#: option check); they must now keep the promise like every other mutant.
FIXED = ("survey-table-067", "survey-table-087", "survey-blocks-106") if SCALE == 1 else ()


def _params(cases):
    return [pytest.param(c, id=c.id) for c in cases]


def read_model(path, case):
    model = attack(lambda: slicer.read_velocity_model(path), path, case)
    if not failed(model):
        check_model(model, case)
    return model


def read_survey(path, case):
    """load_settings on a survey file whose companions (line tables, control points, velocity
    model) are valid and watched too."""
    companions = tuple(p for p in path.parent.iterdir() if p != path)
    result = attack(lambda: slicer.load_settings(path), path, case, also=companions,
                    names=names_survey(path))
    if not failed(result):
        check_settings(result, case)
    return result


@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
@pytest.mark.parametrize("case", MODEL_CASES, ids=lambda c: c.id)
def test_velocity_model_mutants_keep_the_promise(case, tmp_path):
    read_model(case.mutant.materialise(tmp_path / "velocity.toml"), case)


@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
@pytest.mark.parametrize("case", _params(SURVEY_CASES))
def test_survey_file_mutants_keep_the_promise(case, tmp_path):
    folder = write_survey_folder(tmp_path / "survey")
    (folder / "survey.toml").unlink()
    read_survey(case.mutant.materialise(folder / "survey.toml"), case)


def test_fixed_failures_are_the_mutants_they_were():
    """The fixed cases are still generated (a changed generator shows here)."""
    by_id = {c.id: c for c in SURVEY_CASES}
    for case_id in FIXED:
        assert "9999999999" in by_id[case_id].mutant.name, by_id[case_id]


def test_a_line_break_in_a_referenced_file_name_stays_on_one_line(tmp_path):
    folder = write_survey_folder(tmp_path / "survey")
    text = SURVEY_BLOCKS.replace('control_points = "control.csv"', 'control_points = "a\\nb"')
    path = Mutant("newline", text.encode()).materialise(folder / "survey.toml")
    read_survey(path, "control_points with a line break")


def test_the_seeds_themselves_read(tmp_path):
    for name, text in MODELS.items():
        model = read_model(Mutant("seed", text.encode()).materialise(tmp_path / f"{name}.toml"),
                           name)
        assert not failed(model), model
    folder = write_survey_folder(tmp_path / "survey")
    for name, text in SURVEYS.items():
        result = read_survey(Mutant("seed", text.encode()).materialise(folder / f"{name}.toml"),
                             name)
        assert not failed(result), result
        assert len(result.lines) == (6 if name == "blocks" else 3)


# --- properties: any value under any key ------------------------------------------------------

_counter = iter(range(10**9))
_values = st.one_of(
    st.sampled_from(TOML_VALUES),
    st.floats().map(repr),  # TOML spells inf, nan and 1e+300 as Python does
    st.integers(-10**30, 10**30).map(str),
    st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=20).map(
        lambda t: '"' + t.encode("unicode_escape").decode("ascii").replace('"', '\\"') + '"'),
)


@settings(max_examples=40, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(kind=st.sampled_from(["model", "survey"]), data=st.data())
@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
def test_any_value_under_any_key_keeps_the_promise(kind, data, tmp_path):
    texts = MODELS if kind == "model" else SURVEYS
    lines = texts[data.draw(st.sampled_from(sorted(texts)), label="seed")].splitlines()
    keys = [i for i, line in enumerate(lines) if "=" in line]
    for _ in range(data.draw(st.integers(1, 2), label="edits")):
        i = data.draw(st.sampled_from(keys), label="line")
        values = _values
        lines[i] = lines[i].split("=", 1)[0] + "= " + data.draw(values, label="value")
    text = "\n".join(lines) + "\n"
    folder = write_survey_folder(tmp_path / f"s{next(_counter)}")
    if kind == "model":
        read_model(Mutant("values", text.encode()).materialise(folder / "model.toml"), text)
    else:
        read_survey(Mutant("values", text.encode()).materialise(folder / "other.toml"), text)
