"""Tests of slicer.core.errors: one exception family, one-line messages that name ``where``,
and warnings that point at the code which called the library.

Sources named beside the checks: the Python Library Reference, "Built-in Exceptions" (the
exception hierarchy, UserWarning) and "warnings" (``stacklevel``), and "pickle" (exceptions
are pickled with their ``__dict__``, which process engines rely on to send them back).
"""

import importlib
import inspect
import pickle
import pkgutil
import warnings

import pytest

import slicer
from slicer.core import errors
from slicer.core.errors import (
    InputFileError,
    LineTableError,
    OutputError,
    SettingsError,
    SlicerError,
    SlicerWarning,
    warn,
)

ERRORS = [InputFileError, LineTableError, OutputError, SettingsError]


def _library_exceptions():
    """Every exception class (not warning) defined anywhere in the slicer package."""
    found = set()
    for info in pkgutil.walk_packages(slicer.__path__, prefix="slicer."):
        module = importlib.import_module(info.name)
        for _, obj in inspect.getmembers(module, inspect.isclass):
            if (issubclass(obj, Exception) and not issubclass(obj, Warning)
                    and obj.__module__.startswith("slicer")):
                found.add(obj)
    return found


def test_every_library_error_derives_from_slicer_error():
    found = _library_exceptions()
    assert set(ERRORS) | {SlicerError} <= found
    assert [e.__name__ for e in found if not issubclass(e, SlicerError)] == []
    # an ordinary Exception, so "except Exception" still catches it (Built-in Exceptions)
    assert issubclass(SlicerError, Exception) and not issubclass(SlicerError, OSError)


def test_the_warning_is_a_user_warning_and_not_an_error():
    # UserWarning is shown once per location by the default filters (warnings module)
    assert issubclass(SlicerWarning, UserWarning)
    assert not issubclass(SlicerWarning, SlicerError)


@pytest.mark.parametrize("cls", ERRORS)
def test_message_names_where_in_one_line(cls):
    err = cls("sample interval must be positive", where="--sample-interval")
    assert str(err) == "--sample-interval: sample interval must be positive"
    assert "\n" not in str(err)
    assert err.where == "--sample-interval"
    assert err.message == "sample interval must be positive"
    with pytest.raises(SlicerError, match=r"^--sample-interval: "):
        raise err


@pytest.mark.parametrize("cls", ERRORS)
def test_message_without_where_is_the_message_alone(cls):
    err = cls("no lines")
    assert str(err) == "no lines" and err.where is None and err.message == "no lines"


@pytest.mark.parametrize("cls", ERRORS)
def test_errors_survive_pickling_with_where(cls):
    # a process or cluster engine pickles an error raised in a worker back to the caller
    err = pickle.loads(pickle.dumps(cls("file is empty (0 bytes)", where="L000.sgy")))
    assert type(err) is cls
    assert str(err) == "L000.sgy: file is empty (0 bytes)"
    assert (err.where, err.message) == ("L000.sgy", "file is empty (0 bytes)")


def _library_function():
    """Stands for a library function that warns on behalf of its caller."""
    warn("3 NaN sample(s) set to 0")


def test_warn_points_at_the_callers_caller():
    # stacklevel=3 (warnings.warn): 1 is warn itself, 2 the library function, 3 its caller
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        line = inspect.currentframe().f_lineno + 1
        _library_function()
    assert len(caught) == 1
    w = caught[0]
    assert w.category is SlicerWarning and str(w.message) == "3 NaN sample(s) set to 0"
    assert w.filename == __file__ and w.lineno == line


def test_public_names_are_the_same_objects():
    for cls in (*ERRORS, SlicerError, SlicerWarning):
        assert getattr(slicer, cls.__name__) is getattr(errors, cls.__name__)
