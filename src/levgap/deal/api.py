"""``levgap.proforma``: a deal check from a results folder, its saved model and its panel."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

from levgap.deal.check import check_deal
from levgap.deal.result import DealCheck
from levgap.deal.scenario import Scenario
from levgap.errors import ConfigError, OutputError


def proforma(
    results_dir: str | Path,
    firm_id: str,
    scenarios: str | Path | Iterable[Scenario | Mapping[str, Any]],
    *,
    year: int | None = None,
    panel: str | Path | None = None,
) -> DealCheck:
    """Score deal scenarios for one firm against a run's saved model, without refitting.

    Parameters
    ----------
    results_dir : str or pathlib.Path
        A folder written by ``levgap analyze`` (tables, ``run.json`` and ``model.json``).
    firm_id : str
        A firm of the results.
    scenarios : path, or iterable of Scenario or dict
        A scenario file (TOML, see ``data_templates/deal.toml``), or scenarios (a dict holds
        the keys of a ``[[scenario]]`` table).
    year : int, optional
        Fiscal year to start from; default the firm's latest.
    panel : str or pathlib.Path, optional
        The run's input panel, when it is no longer where ``run.json`` says; it must be the
        same file (its sha256 is checked).

    Returns
    -------
    DealCheck
        ``.table`` (the ``proforma.csv`` rows), ``.contributions``, ``.tradeoff``,
        ``.write(out_dir)``.

    Raises
    ------
    ConfigError, OutputError, SchemaError
        One line naming the file (and scenario and key).

    Examples
    --------
    >>> check = levgap.proforma("results/", "TR0069", "deal.toml")  # doctest: +SKIP
    >>> check.table[["scenario", "measure", "target"]]  # doctest: +SKIP
    """
    from levgap import load_model  # type: ignore[attr-defined]
    from levgap.report.tables import read_outputs

    out = Path(results_dir)
    if isinstance(scenarios, str | Path):
        from levgap.ingest.scenarios import read_scenarios

        chosen = read_scenarios(scenarios)
    else:
        chosen = tuple(s if isinstance(s, Scenario) else _from_mapping(s) for s in scenarios)
    if not chosen:
        raise ConfigError("scenarios must hold at least one scenario; got none.")
    tables, manifest = read_outputs(out, names=["targets", "drivers"])
    for name in ("targets", "drivers"):
        if name not in tables:
            raise OutputError(f"{out}: the folder must hold levgap's {name} table; got none. "
                              "Re-run `levgap analyze`.")
    model = load_model(out)
    data = run_panel(out, manifest, panel)
    return check_deal(model, data, tables["targets"], tables["drivers"], firm_id, chosen,
                      year=year, source=str(out))


def _from_mapping(values: Mapping[str, Any]) -> Scenario:
    try:
        return Scenario(**{k: (float(v) if isinstance(v, int) and not isinstance(v, bool)
                               else v) for k, v in values.items()})
    except TypeError as exc:
        raise ConfigError(f"a scenario must hold scenario keys only; got {exc}.") from None


def run_panel(out: Path, manifest: Mapping[str, Any], panel: str | Path | None) -> Any:
    """The run's input panel, read with the run's configuration and checked by its sha256."""
    from levgap.config import RunConfig
    from levgap.ingest import read_panel

    inputs = [i for i in manifest.get("inputs", []) if isinstance(i, Mapping)
              and i.get("role") is None]
    if not inputs:
        raise OutputError(f"{out}/run.json must name the run's input panel; got none. Pass "
                          "--panel PATH.")
    recorded = inputs[0]
    path = Path(panel) if panel is not None else _locate(out, str(recorded.get("path", "")))
    options = dict(manifest.get("options") or {})
    options.pop("source", None)
    config = RunConfig.from_dict(options, source=f"{out}/run.json")
    data = read_panel(path, config=config)
    if recorded.get("sha256") and data.sha256 != recorded["sha256"]:
        raise ConfigError(
            f"{path}: the panel must be the file the run read (sha256 "
            f"{str(recorded['sha256'])[:12]}...); got a file with sha256 "
            f"{str(data.sha256)[:12]}... Pass --panel with the run's input, or re-run "
            "`levgap analyze`."
        )
    return data.data


def _locate(out: Path, recorded: str) -> Path:
    p = Path(recorded)
    for candidate in (p, out / p.name):
        if candidate.is_file():
            return candidate
    raise OutputError(
        f"{recorded}: the run's input panel must be readable to build pro forma statements; "
        "got no file there. Pass --panel PATH (the same file, checked by its sha256)."
    )
