"""Loading a model written as a Python module, and reporting its errors in the user's terms.

A model module defines ``model(x, p1, p2, ...)``; optionally a hand-derived Jacobian with the
same arguments and a ``guess(x, y) -> {name: value}`` for starting values. The names of the
functions are set in ``[model]``. The module is executed from its file, never imported by name,
so two scenarios with a ``model.py`` each do not collide. Modules it imports from its own folder
(a ``helper.py`` beside it) are part of the model: their sources enter ``ModelModule.digest``, so
a changed helper invalidates every cache keyed by the scenario, and they are dropped from
``sys.modules`` after loading, so the next load reads them from disk again instead of reusing
the first version imported in this process.
"""
from __future__ import annotations

import hashlib
import importlib.util
import inspect
import sys
import traceback
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from types import ModuleType

from ..errors import InputError
from .settings import nearest


@dataclass(frozen=True)
class ModelModule:
    """The callables found in a model module, and the model's parameter names.

    ``digest`` is a SHA-256 (hex) of the model file and of every module it imported from its
    own folder, each named by its path relative to that folder.
    """

    path: Path
    model: Callable
    parameter_names: tuple[str, ...]
    jacobian: Callable | None
    guess: Callable | None
    digest: str


def load_model_module(path: Path, function: str, jacobian: str | None, guess: str | None) -> ModelModule:
    """Execute the module at ``path`` and pick out its functions.

    Raises:
        InputError: missing file, an error while executing the module (with the module's own
            message and line), a missing function, or a model signature that is not
            ``(x, p1, ..., pn)``.
    """
    if not path.is_file():
        raise InputError(f"{path}: model file not found")
    module, local_sources = _execute(path)
    model = _function(module, function, path, "model")
    names = _parameter_names(model, path)
    hand_jacobian = _function(module, jacobian, path, "jacobian") if jacobian else None
    if hand_jacobian is not None:
        jacobian_names = _parameter_names(hand_jacobian, path)
        if jacobian_names != names:
            raise InputError(f"{path}: {jacobian}() takes ({', '.join(jacobian_names)}) after x, "
                             f"but {function}() takes ({', '.join(names)}); they must match")
    guesser = _function(module, guess, path, "guess") if guess else None
    return ModelModule(path=path, model=model, parameter_names=names, jacobian=hand_jacobian, guess=guesser,
                       digest=_sources_digest(path, local_sources))


def describe_model_error(error: BaseException, path: Path, action: str) -> str:
    """One line: where in the model file the error arose, and the model's own message."""
    frames = [frame for frame in traceback.extract_tb(error.__traceback__)
              if Path(frame.filename).resolve() == path.resolve()]
    where = f"{path} line {frames[-1].lineno} in {frames[-1].name}()" if frames else str(path)
    return f"{where}: {type(error).__name__}: {error} ({action})"


def _execute(path: Path) -> tuple[ModuleType, list[Path]]:
    """The executed module, and the source files of the modules it imported from its folder."""
    digest = hashlib.sha256(str(path.resolve()).encode()).hexdigest()[:12]
    spec = importlib.util.spec_from_file_location(f"fitaudit_model_{digest}", path)
    module = importlib.util.module_from_spec(spec)
    folder = path.parent.resolve()
    already_loaded = set(sys.modules)
    sys.path.insert(0, str(path.parent))
    try:
        spec.loader.exec_module(module)
    except SyntaxError as error:
        raise InputError(f"{path} line {error.lineno}: SyntaxError: {error.msg}") from None
    except Exception as error:
        raise InputError(describe_model_error(error, path, "while loading the module")) from None
    finally:
        sys.path.remove(str(path.parent))
        imported_here = {name: sys.modules[name] for name in set(sys.modules) - already_loaded}
        local = {name: source for name, source in
                 ((name, _source_inside(loaded, folder)) for name, loaded in imported_here.items()) if source}
        for name in local:
            del sys.modules[name]
    return module, sorted(set(local.values()))


def _source_inside(module: ModuleType, folder: Path) -> Path | None:
    """The module's source file when it lies under ``folder``, else None."""
    file = getattr(module, "__file__", None)
    if not file:
        return None
    source = Path(file).resolve()
    return source if source.is_relative_to(folder) and source.is_file() else None


def _sources_digest(path: Path, local_sources: list[Path]) -> str:
    folder = path.parent.resolve()
    digest = hashlib.sha256()
    for source in [path.resolve(), *local_sources]:
        digest.update(source.relative_to(folder).as_posix().encode() + b"\0" + source.read_bytes() + b"\0")
    return digest.hexdigest()


def _function(module: ModuleType, name: str, path: Path, role: str) -> Callable:
    candidate = getattr(module, name, None)
    if not callable(candidate):
        functions = [key for key, value in vars(module).items()
                     if inspect.isfunction(value) and value.__module__ == module.__name__]
        raise InputError(f"{path}: no function '{name}' for the {role}{nearest(name, functions)}; "
                         f"functions defined: {', '.join(functions) or 'none'}")
    if inspect.isclass(candidate):
        raise InputError(f"{path}: '{name}' is a class; the {role} must be a function")
    return candidate


def _parameter_names(function: Callable, path: Path) -> tuple[str, ...]:
    signature = inspect.signature(function)
    parameters = list(signature.parameters.values())
    plain = (inspect.Parameter.POSITIONAL_ONLY, inspect.Parameter.POSITIONAL_OR_KEYWORD)
    if any(parameter.kind not in plain for parameter in parameters):
        raise InputError(f"{path}: {function.__name__}() must take plain arguments (x, p1, ..., pn); "
                         "*args, **kwargs and keyword-only arguments are not allowed")
    if len(parameters) < 2:
        raise InputError(f"{path}: {function.__name__}() must take x followed by at least one parameter")
    return tuple(parameter.name for parameter in parameters[1:])
