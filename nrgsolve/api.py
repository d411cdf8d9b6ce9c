"""The Python interface: :func:`run` a configuration, :func:`load` a stored result.

Both return a :class:`~nrgsolve.result.Result`; a result just computed and the
same result read back from its file are equal array for array.  A
configuration is given the way that suits the caller: a path to a TOML file,
a mapping with the same tables and keys as a file, or a validated
:class:`~nrgsolve.config.RunSpec`.  All three go through the same validation
and raise the same one-line :class:`~nrgsolve.errors.ConfigError`.

Units: energies and temperatures in units of the half-bandwidth D (k_B = 1);
``exchange`` is ρJ with ρ = 1/(2D), J > 0 antiferromagnetic; ``hybridization``
is Γ = πρV².
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

from .config import RunSpec, load_config, spec_from_mapping
from .errors import ConfigError
from .result import Result, result_from_run

__all__ = ["run", "load", "as_spec"]


def as_spec(config) -> RunSpec:
    """A validated :class:`RunSpec` from a path, a mapping or a spec.

    Parameters
    ----------
    config : str, os.PathLike, Mapping or RunSpec
        A TOML file; ``{"impurity": {...}, "run": {...}, ...}`` with the keys of a file
        (numpy numbers and arrays accepted); or a spec, returned as it is.

    Returns
    -------
    RunSpec

    Raises
    ------
    ConfigError
        One line naming the key, what was received and the allowed range.

    Examples
    --------
    >>> as_spec({"impurity": {"model": "anderson", "interaction": 0.2}}).impurity.epsilon_d
    -0.1
    """
    if isinstance(config, RunSpec):
        return config
    if isinstance(config, Mapping):
        return spec_from_mapping(config)
    if isinstance(config, (str, os.PathLike)):
        return load_config(config)
    raise ConfigError(f"config: expected a path to a TOML file, a mapping of tables or a RunSpec, "
                      f"got {type(config).__name__}")


def run(config, *, workers: int | None = None, progress: bool = False, check_memory: bool = True) -> Result:
    """Run one configuration (every twist, and the checking runs of ``run.error_estimate``).

    Parameters
    ----------
    config : str, os.PathLike, Mapping or RunSpec
        See :func:`as_spec`.  A ``[sweep]`` table is refused: loop in Python instead.
    workers : int, optional
        Parallel processes for the twists (default: ``run.workers``; 0 means one per twist).
        Worker processes need the calling script to guard its top level with
        ``if __name__ == "__main__":`` (notebooks need nothing).
    progress : bool
        Show a progress bar (tqdm) on a terminal or in a notebook.
    check_memory : bool
        Estimate the memory and refuse a run that cannot fit into this machine, before it starts.

    Returns
    -------
    Result
        Not yet saved: call :meth:`Result.save`.

    Raises
    ------
    ConfigError
        Invalid configuration.
    NrgInputError
        The run cannot fit into memory, or a table file cannot be read.

    Examples
    --------
    >>> res = run({"impurity": {"model": "kondo", "exchange": 0.3},
    ...            "run": {"kept_states": 100, "lowest_temperature": 1e-4},
    ...            "discretization": {"twists": 1}})
    >>> res.thermo.T_chi.shape == res.thermo.temperature.shape
    True
    """
    from .solve import bath_from_spec, n_iterations, solve

    spec = as_spec(config)
    if spec.sweep.parameters:
        raise ConfigError(f"{spec.config_path}: has a [sweep] table; run() runs one configuration "
                          f"(loop over the values in Python, or use 'nrgsolve sweep')")
    bath = bath_from_spec(spec)
    if check_memory:
        from .resources import check_resources, concurrent_workers
        check_resources(spec, bath, workers=concurrent_workers(spec) if workers is None else max(1, workers))
    if not progress:
        return result_from_run(solve(spec, workers=workers))
    from tqdm.auto import tqdm
    with tqdm(total=n_iterations(spec, bath), desc=spec.impurity.model, unit="it", leave=False) as bar:
        return result_from_run(solve(spec, progress=bar.update, workers=workers))


def load(path) -> Result:
    """Read a result file written by ``nrgsolve run``, a sweep or :meth:`Result.save`.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    Result
        Equal, array for array, to the result that was saved.

    Raises
    ------
    NrgInputError
        Missing file, or not an nrgsolve result file.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> res = run({"impurity": {"model": "resonant-level", "hybridization": 0.05},
    ...            "run": {"kept_states": 60, "lowest_temperature": 1e-3}, "discretization": {"twists": 1}})
    >>> path = res.save(pathlib.Path(tempfile.mkdtemp()) / "level.h5")
    >>> load(path) == res
    True
    """
    from .store import read_result
    return read_result(Path(path))
