"""Batch runs: many scenarios from one TOML file, in local processes or on a Dask cluster.

Batch file layout::

    [base]                       # a scenario: the keys of a scenario file (fallway.scenario)
    dem = "site.tif"             # relative paths are relative to the batch file
    [base.points]
    start = [512300.0, 5401200.0]
    [base.mover]
    mu = 0.15

    [vary]                       # a product: every combination of these lists
    points.end = [[512800.0, 5400900.0], [512900.0, 5400700.0]]
    mover.mu = [0.1, 0.2]
    line.kind = ["ground", "raised"]

    [[run]]                      # and/or explicit runs (after the product), overrides of base
    name = "steep-start"
    points = { start = [512250.0, 5401300.0], end = [512800.0, 5400900.0] }

    [options]                    # optional: how each run is searched (fallway.SearchOptions)
    plan = "auto"                # or "full", "corridor" (coarse-to-fine)
    coarse_factor = 4
    corridor_m = 40.0
    label_cap = 4

Keys under ``[vary]`` are dotted paths into the scenario (``mover.mu``, ``points.end``,
``line.kind``, ``search.neighbours``...), each a list of values.  Product runs are named
``run-001``, ``run-002``... in the order of the product (the last key varies fastest).

Run names (``[[run]] name``) are plain folder names: they start with a letter or digit
and hold letters, digits, ``.``, ``-``, ``_`` and spaces (no hidden folders, no paths).

Each run writes ``summary.json``, ``route.geojson`` and ``profile.csv`` into
``out_dir/<name>/``; a run that fails records its one-line error and leaves no folder.
All runs end up in ``out_dir/batch.csv``: name, the varied parameters, travel_time_s,
lattice_time_s, length_m, drop_m, max_speed_m_s, exit_speed_m_s, status ("ok" or
"error"), run_s and error.  ``run_s`` is the run's seconds of computing (search,
refinement and writing its files); like ``route --timings`` it is filled only with
``timings=True`` (``batch --timings``), so that by default the same batch gives the same
bytes.

The whole batch is one :class:`~fallway.export.OutputSet`: the run folders are written
into its working folder and appear together with ``batch.csv`` when every run has
ended, or not at all (an error, Ctrl-C, SIGTERM).  Earlier results (``batch.csv``, a
run folder of the same name) are refused unless ``overwrite`` is given; then they are
replaced, together with the run folders the earlier ``batch.csv`` lists, so a folder
never mixes two batches.  Other files in ``out_dir`` stay.
"""

from __future__ import annotations

import copy
import csv
import itertools
import math
import os
import re
import sys
from pathlib import Path

from .errors import FallwayIOError, ScenarioError

__all__ = ["run_batch", "expand_batch", "BATCH_COLUMNS"]

#: Fixed columns of batch.csv (the varied parameters come between name and these).
BATCH_COLUMNS = ("travel_time_s", "lattice_time_s", "length_m", "drop_m", "max_speed_m_s", "exit_speed_m_s",
                 "status", "run_s", "error")
# the columns of a run's numbers (None in a failed run's row)
_RESULT_COLUMNS = ("travel_time_s", "lattice_time_s", "length_m", "drop_m", "max_speed_m_s", "exit_speed_m_s")

# a run name: a letter or digit first, then letters, digits, '.', '-', '_' or spaces
_RUN_NAME = re.compile(r"[^\W_][\w.\- ]{0,99}")
#: The table of a batch run, beside the run folders.
BATCH_TABLE = "batch.csv"

_OPTION_KEYS = ("plan", "coarse_factor", "corridor_m", "max_widen", "widen_tol", "label_cap", "energy_tol",
                "max_labels", "heuristic", "gap")


def _flatten(d: dict) -> dict:
    from .export import flatten

    return flatten(d, ".")


def _set(d: dict, dotted: str, value) -> None:
    parts = dotted.split(".")
    for p in parts[:-1]:
        d = d.setdefault(p, {})
        if not isinstance(d, dict):
            raise ScenarioError(f"vary key {dotted} does not name a scenario value")
    d[parts[-1]] = value


def _merge(base: dict, over: dict) -> dict:
    out = copy.deepcopy(base)
    for k, v in over.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


def expand_batch(data: dict, *, base_dir=None) -> tuple[list[dict], dict]:
    """Runs of a parsed batch file: ``[{"name", "scenario", "params"}, ...]`` and the options.

    Every run's scenario is validated (:class:`~fallway.scenario.Scenario`) here, so a
    typo fails before anything runs.

    Examples
    --------
    >>> runs, opts = expand_batch({"base": {"points": {"start": [0, 9]}},
    ...                            "vary": {"mover": {"mu": [0.1, 0.2]}, "points.end": [[9, 0], [9, 1]]}})
    >>> [(r["name"], r["params"]["mover.mu"], r["params"]["points.end"]) for r in runs][:2]
    [('run-001', 0.1, [9, 0]), ('run-002', 0.1, [9, 1])]
    """
    import dataclasses

    from .params import SearchOptions
    from .scenario import Scenario, check_value, kind_of

    unknown = sorted(set(data) - {"base", "vary", "run", "options"})
    if unknown:
        raise ScenarioError(f"unknown batch key {unknown[0]}; allowed: base, vary, run, options")
    base = data.get("base", {})
    if not isinstance(base, dict):
        raise ScenarioError("[base] must be a table of scenario keys")
    vary = _flatten(data.get("vary", {}))
    for k, v in vary.items():
        if not isinstance(v, list) or not v:
            raise ScenarioError(f"vary.{k} must be a non-empty list of values, got {v!r}")
    explicit = data.get("run", [])
    if not isinstance(explicit, list):
        raise ScenarioError("[[run]] entries must be tables (use [[run]], not [run])")
    options = data.get("options", {})
    if not isinstance(options, dict):
        raise ScenarioError("[options] must be a table of search options")
    bad = sorted(set(options) - set(_OPTION_KEYS))
    if bad:
        raise ScenarioError(f"unknown batch option {bad[0]}; allowed: {', '.join(_OPTION_KEYS)}")
    kinds = {f.name: kind_of(f.type) for f in dataclasses.fields(SearchOptions)}
    options = {k: check_value(f"options.{k}", v, kinds[k]) for k, v in options.items()}  # the scenario's rule
    runs = []
    keys = list(vary)
    if keys:
        for i, combo in enumerate(itertools.product(*(vary[k] for k in keys)), start=1):
            sc = copy.deepcopy(base)
            for k, v in zip(keys, combo):
                _set(sc, k, copy.deepcopy(v))
            runs.append({"name": f"run-{i:03d}", "scenario": sc, "params": dict(zip(keys, combo))})
    for j, item in enumerate(explicit, start=1):
        if not isinstance(item, dict) or not isinstance(item.get("name"), str) or not item["name"]:
            raise ScenarioError(f"[[run]] number {j} needs a name = \"...\"")
        over = {k: v for k, v in item.items() if k != "name"}
        runs.append({"name": item["name"], "scenario": _merge(base, over), "params": _flatten(over)})
    if not runs:
        runs.append({"name": "run-001", "scenario": copy.deepcopy(base), "params": {}})
    names = [r["name"] for r in runs]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise ScenarioError(f"run name {dup[0]} appears twice; give every [[run]] its own name")
    for r in runs:
        _check_run_name(r["name"])
        try:
            Scenario.from_dict(r["scenario"], base_dir=base_dir)
        except ScenarioError as err:
            raise ScenarioError(f"run {r['name']}: {err}") from None
    return runs, options


def _check_run_name(name: str) -> None:
    if (not _RUN_NAME.fullmatch(name) or name.endswith((".", " "))
            or name.lower() == BATCH_TABLE):
        raise ScenarioError(f"run name {name!r} must be a plain folder name: a letter or digit first, then "
                            "letters, digits, '.', '-', '_' or spaces (at most 100), not ending in '.' or a space, "
                            f"not {BATCH_TABLE}")


def run_one(spec: dict) -> dict:
    """Run one batch entry (picklable in and out); a failed run is a row with its error.

    The run's files go into ``spec["out_dir"]/<name>/`` as one output set; that folder's
    parent (the batch's working folder) must exist: a run that outlives an interrupted
    batch fails instead of creating it again.
    """
    import dataclasses

    from .app import CORE_FILES, write_scenario
    from .export import OutputSet
    from .scenario import Scenario

    import time

    row = {"name": spec["name"], **{k: _cell(v) for k, v in spec["params"].items()}}
    t0 = time.perf_counter()
    try:
        sc = Scenario.from_dict(spec["scenario"], base_dir=spec.get("base_dir"))
        opts = dict(spec.get("options", {}))
        if opts:
            sc = dataclasses.replace(sc, search=dataclasses.replace(sc.search, **opts))  # validated
        with OutputSet(Path(spec["out_dir"]) / spec["name"], result_names=CORE_FILES, make_parents=False) as outs:
            r, _ = write_scenario(outs, sc, outputs="core")
        s = r.summary
        row.update({c: getattr(s, c) for c in _RESULT_COLUMNS}, status="ok", error="")
    except Exception as err:  # noqa: BLE001 - a failed run is a row of batch.csv, never the end of the batch
        msg = " ".join(str(err).split()) or type(err).__name__
        row.update(dict.fromkeys(_RESULT_COLUMNS), status="error", error=f"{type(err).__name__}: {msg}")
    row["run_s"] = time.perf_counter() - t0
    return row


def _cell(v):
    if isinstance(v, (list, tuple)):
        return " ".join(str(x) for x in v)
    return v


def run_batch(scenarios_path, out_dir, *, workers: int | None = None, scheduler=None,
              overwrite: bool = False, timings: bool = False) -> list[dict]:
    """Run every scenario of a batch file; write per-run outputs and ``batch.csv``.

    Parameters
    ----------
    scenarios_path : path
        The batch TOML (module notes).
    out_dir : path
        Folder for ``<run-name>/`` sub-folders and ``batch.csv`` (created if missing).
    workers : int, optional
        Local worker processes (default ``os.cpu_count()``); 1 runs in this process.
        Ignored with ``scheduler``.
    scheduler : str or dask.distributed.Client, optional
        A Dask scheduler address (``"tcp://host:8786"``) or a client: the runs go to
        that cluster (needs ``dask[distributed]``).
    overwrite : bool
        Replace the results of an earlier batch in ``out_dir`` (module notes).
    timings : bool
        Fill batch.csv's ``run_s`` column (seconds of computing per run; the returned
        rows always hold it).

    Returns
    -------
    list of dict
        One row per run, in batch order (the rows of batch.csv).

    Raises
    ------
    FallwayIOError
        The batch file is missing.
    ScenarioError
        The batch file cannot be read, is not UTF-8 or not valid TOML.
    OutputExistsError
        ``out_dir`` holds results of an earlier batch and ``overwrite`` is False.
    ScenarioError
        A run's scenario does not validate (nothing is run).
    """
    from .export import OutputSet
    from .scenario import read_toml

    p = Path(os.fspath(scenarios_path))
    if not p.is_file():
        raise FallwayIOError(f"batch file not found: {p}; check the path")
    data = read_toml(p, "batch file")
    base_dir = str(p.resolve().parent)
    runs, options = expand_batch(data, base_dir=base_dir)
    n = (os.cpu_count() or 1) if workers is None else int(workers)
    if scheduler is None and n < 1:
        from .errors import ParameterError
        raise ParameterError(f"workers must be >= 1, got {workers}")
    out = Path(os.fspath(out_dir))
    names = [r["name"] for r in runs]
    earlier = [m for m in _earlier_runs(out / BATCH_TABLE) if m not in names] if overwrite else []
    with OutputSet(out, overwrite=overwrite, result_names=(BATCH_TABLE,), result_dirs=names + earlier) as outs:
        for name in names:  # a failed run leaves no folder: optional
            outs.path(name, optional=True)
        work = str(outs.tmp_dir)
        specs = [{**r, "base_dir": base_dir, "out_dir": work, "options": options} for r in runs]
        if scheduler is not None:
            rows = _run_dask(specs, scheduler)
        elif n == 1 or len(specs) == 1:
            rows = [run_one(s) for s in specs]
        else:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            ctx = multiprocessing.get_context("spawn")  # no fork of a process holding threads
            _quiet_resource_tracker()
            with ProcessPoolExecutor(max_workers=min(n, len(specs)), mp_context=ctx,
                                     initializer=_quiet_worker) as ex:
                rows = list(ex.map(run_one, specs))
        _write_table(rows if timings else [{**r, "run_s": None} for r in rows], runs, outs.path(BATCH_TABLE))
    return rows


def _quiet_resource_tracker() -> None:
    """Start multiprocessing's resource tracker (if it is not running yet) with its own
    UserWarnings off.  A stop by signal kills the workers and ends this process at once
    (``cli._end_on_signal``); the tracker then unlinks the pool's semaphores, as it should,
    but also warned of "leaked semaphore objects" on the user's terminal after fallway's
    one-line message.  The tracker takes its warning options from ``sys.warnoptions``
    when it starts: a tracker already running (an earlier pool in the same process) keeps
    its own, and this one stays quiet on a real leak too (the tracker still cleans up)."""
    from multiprocessing import resource_tracker

    saved = list(sys.warnoptions)
    sys.warnoptions.append("ignore::UserWarning:multiprocessing.resource_tracker")
    try:
        resource_tracker.ensure_running()
    finally:
        sys.warnoptions[:] = saved


def _quiet_worker() -> None:
    """Workers leave Ctrl-C and hang-ups to the main process, which stops them and cleans up."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, signal.SIG_IGN)


def _earlier_runs(table: Path) -> list[str]:
    """Run names an earlier batch.csv lists (plain run names only; none if it cannot be read)."""
    try:
        with open(table, newline="", encoding="utf-8") as fh:
            names = [row.get("name") or "" for row in csv.DictReader(fh)]
    except FileNotFoundError:
        return []
    except (OSError, UnicodeDecodeError, csv.Error):  # not a table this command wrote: nothing to add
        return []
    out = []
    for name in names:
        try:
            _check_run_name(name)
        except ScenarioError:
            continue
        out.append(name)
    return out


def _run_dask(specs, scheduler):
    try:
        from dask.distributed import Client
    except ImportError:
        from .errors import ParameterError
        raise ParameterError("a Dask scheduler needs dask.distributed: pip install 'dask[distributed]'") from None
    own = not isinstance(scheduler, Client)
    client = Client(scheduler) if own else scheduler
    try:
        futures = client.map(run_one, specs, pure=False, key=[f"fallway-{s['name']}-{id(s)}" for s in specs])
        return client.gather(futures)
    finally:
        if own:
            client.close()


def _write_table(rows, runs, path):
    from .evaluate import csv_text
    from .export import atomic_write

    params = []
    for r in runs:
        for k in r["params"]:
            if k not in params:
                params.append(k)
    cols = ["name", *params, *BATCH_COLUMNS]
    with atomic_write(path) as fh:
        w = csv.writer(fh, lineterminator="\r\n")
        w.writerow([csv_text(c) for c in cols])
        for row in rows:
            w.writerow(["" if row.get(c) is None else _fmt(row.get(c), csv_text) for c in cols])


def _fmt(v, text):
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, float):
        return "" if not math.isfinite(v) else repr(v)
    if isinstance(v, int):
        return str(v)
    return text(str(v))
