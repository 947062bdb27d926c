"""Commands for replication work: ``estimate``, ``table``, ``describe``, ``adjust``."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer

from levgap.cli.app import app
from levgap.cli.common import (
    collect_notes,
    console,
    echo,
    guard,
    load_config,
    merge_notes,
    parse_measures,
)

if TYPE_CHECKING:
    from levgap.config import RunConfig


def spec_changes(*, effects: str | None = None, industry_digits: int | None = None,
                 drivers: str | None = None, input_drivers: str | None = None,
                 lag: bool | None = None, estimator: str | None = None) -> dict[str, Any]:
    """``[model]`` keys set on the command line (``analyze`` and ``estimate`` share them)."""
    out: dict[str, Any] = {}
    if effects is not None:
        out["effects"] = effects
    if industry_digits is not None:
        out["industry_digits"] = industry_digits
    if drivers is not None:
        out["drivers"] = tuple(d.strip() for d in drivers.split(",") if d.strip())
    if input_drivers is not None:
        out["input_drivers"] = tuple(d.strip() for d in input_drivers.split(",") if d.strip())
    if lag is not None:
        out["lag_drivers"] = lag
    if estimator is not None:
        out["estimator"] = estimator
    return out


def configured(config: Path | None, measure: str, **changes: Any) -> RunConfig:
    """The run configuration with the command line's ``[model]`` keys applied (checked)."""
    from dataclasses import asdict, replace

    from levgap.config import ModelSpec

    cfg = load_config(config)
    if measure != "both" or config is None:
        changes["measures"] = parse_measures(measure)
    changes = {k: v for k, v in changes.items() if v is not None}
    if changes:
        cfg = replace(cfg, model=ModelSpec(**{**asdict(cfg.model), **changes}))
    return cfg


EFFECTS_HELP = "Fixed effects: industry,year (default), firm,year, year or none."
DRIVERS_HELP = ("Drivers, comma-separated (replaces [model] drivers): tangibility, "
                "profitability, earnings_volatility, size, market_to_book, rd_intensity, "
                "log_revenue, industry_median_leverage, dividend_payer.")
INPUT_HELP = "Numeric input columns used as further drivers, comma-separated."


@app.command()
def estimate(
    panel: Path = typer.Argument(..., help="Panel file (CSV, Parquet or XLSX) in schema v1."),
    out: Path = typer.Option(..., "--out", help="Output folder."),
    estimator: str = typer.Option(None, "--estimator",
                                  help="pooled (default) or fama-macbeth."),
    effects: str = typer.Option(None, "--effects", help=EFFECTS_HELP),
    industry_digits: int = typer.Option(None, "--industry-digits", min=0,
                                        help="Industry level: the code's first n characters."),
    drivers: str = typer.Option(None, "--drivers", help=DRIVERS_HELP),
    input_drivers: str = typer.Option(None, "--input-drivers", help=INPUT_HELP),
    lag: bool = typer.Option(None, "--lag/--no-lag",
                             help="Explain leverage with the previous year's drivers."),
    measure: str = typer.Option("both", "--measure", help="book, market or both."),
    model: str = typer.Option(None, "--model",
                              help="Pooled model: fractional (default) or linear."),
    cluster: str = typer.Option(None, "--cluster", help="firm, firm-year or industry."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML)."),
    sample: bool = typer.Option(False, "--sample", help="Also write the estimation sample."),
    force: bool = typer.Option(False, "--force", help="Write into a folder holding other files."),
) -> None:
    """Estimate one specification for the regression table, without targets.

    Firm effects (--effects firm,year: least squares, firm effects absorbed) and Fama-MacBeth
    (--estimator fama-macbeth: one least-squares cross-section a year) serve the table only;
    a pooled model also gets its cross-fitted out-of-sample R². Writes coefficients.csv,
    model_fit.csv, exclusions.csv (and sample.csv) with run.json; `levgap table` reads it.

    Example: levgap estimate panel.csv --out fm/ --estimator fama-macbeth --effects year
    """
    with guard():
        from levgap.estimation import estimate as run_estimate
        from levgap.ingest import read_panel

        cfg = configured(config, measure, model=model, cluster=cluster, **spec_changes(
            effects=effects, industry_digits=industry_digits, drivers=drivers,
            input_drivers=input_drivers, lag=lag, estimator=estimator))
        notes: list[str] = []
        with collect_notes(notes):
            data = read_panel(panel, config=cfg)
            result = run_estimate(data, config=cfg, sample=sample)
        inputs = (str(panel), *((cfg.source,) if cfg.source else ()))
        written = result.write(out, force=force, inputs=inputs)
        con = console()
        for note in merge_notes(result.manifest.get("warnings", []), notes):
            console(stderr=True).print(f"note: {note}")
        for f in result.model_fit.itertuples():
            con.print(f"{f.measure} leverage ({f.model}): {f.n_obs} firm-years, {f.n_firms} "
                      f"firms, R² {f.r2:.3f} in sample")
        echo(f"Outputs written to {out}/: {', '.join(p.name for p in written)}.")


@app.command()
def table(
    out_dirs: list[Path] = typer.Argument(..., help="Folders written by levgap analyze or "
                                          "levgap estimate, one column group each."),
    fmt: str = typer.Option("latex", "--format", help="latex, markdown or csv."),
    digits: int = typer.Option(3, "--digits", min=0, max=8,
                               help="Decimals of estimates and standard errors."),
    output: Path = typer.Option(None, "--output", "-o",
                                help="Write the table to this file instead of printing it."),
) -> None:
    """Print a regression table: one column per folder and measure, standard errors in
    parentheses, significance marks, the sign the literature expects, what each column
    absorbed, the estimator, clustering, N and R² in and out of sample.

    LaTeX needs \\usepackage{booktabs}.

    Example: levgap table pooled/ fm/ fe/ --format latex -o table.tex
    """
    with guard():
        from levgap.report.publication import RunTables, comparison_table
        from levgap.report.tables import read_outputs
        from levgap.report.texttables import FORMATS

        if fmt not in FORMATS:
            raise typer.BadParameter(f"must be latex, markdown or csv; got {fmt!r}.",
                                     param_hint="--format")
        protected: list[Path] = []
        if output is not None:
            from levgap.cli.results import _refuse_run_files

            for d in out_dirs:
                protected += _refuse_run_files(d, output)
        runs = []
        for d in out_dirs:
            tables, manifest = read_outputs(d, names=["coefficients", "model_fit"])
            missing = [n for n in ("coefficients", "model_fit") if n not in tables]
            if missing:
                raise typer.BadParameter(f"{d} holds no {missing[0]} table.",
                                         param_hint="DIR")
            runs.append(RunTables(tables["coefficients"], tables["model_fit"], manifest))
        text = comparison_table(runs, fmt=fmt, digits=digits)
        if output is None:
            typer.echo(text, nl=False)
        else:
            from levgap.outputs import atomic_write_bytes

            atomic_write_bytes(output, text.encode("utf-8"), inputs=protected)
            echo(f"Table written to {output}.")


@app.command()
def describe(
    source: Path = typer.Argument(..., help="A panel file, or a folder written by levgap "
                                  "analyze or estimate."),
    fmt: str = typer.Option("markdown", "--format", help="markdown, latex or csv."),
    digits: int = typer.Option(3, "--digits", min=0, max=8, help="Decimals."),
    measure: str = typer.Option("both", "--measure", help="book, market or both (a panel)."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML; a panel)."),
    panel: Path = typer.Option(None, "--panel",
                               help="A results folder's input panel, if it has moved."),
    output: Path = typer.Option(None, "--output", "-o",
                                help="Write the tables to this file instead of printing them."),
) -> None:
    """Descriptive statistics (N, mean, sd, percentiles; raw and winsorised) of every measure
    and driver of the estimation sample, and their correlation matrix.

    From a panel: the sample the run configuration would estimate on. From a results
    folder: its sample.csv (analyze --sample), else its input panel read again (checked by
    its sha256) with the run's options.

    Example: levgap describe panel.csv --format latex -o describe.tex
    """
    with guard():
        from levgap.describe import describe_sample, format_description
        from levgap.report.texttables import FORMATS

        if fmt not in FORMATS:
            raise typer.BadParameter(f"must be markdown, latex or csv; got {fmt!r}.",
                                     param_hint="--format")
        notes: list[str] = []
        with collect_notes(notes):
            sample, inputs = _sample_of(source, config, measure, panel)
        text = format_description(describe_sample(sample), fmt=fmt, digits=digits)
        if output is None:
            typer.echo(text, nl=False)
        else:
            from levgap.outputs import atomic_write_bytes

            atomic_write_bytes(output, text.encode("utf-8"), inputs=inputs)
            echo(f"Tables written to {output}.")


def _sample_of(source: Path, config: Path | None, measure: str, panel: Path | None
               ) -> tuple[Any, list[Path]]:
    """The estimation sample of a panel (with a configuration) or of a results folder."""
    from levgap.estimation import sample_of

    if source.is_dir():
        from levgap.deal.api import run_panel
        from levgap.report.tables import read_outputs

        tables, manifest = read_outputs(source)
        inputs = [Path(i["path"]) for i in manifest.get("inputs", [])
                  if isinstance(i, dict) and isinstance(i.get("path"), str)]
        if "sample" in tables:
            return tables["sample"], inputs
        from levgap.config import RunConfig

        options = dict(manifest.get("options") or {})
        options.pop("source", None)
        cfg = RunConfig.from_dict(options, source=f"{source}/run.json")
        return sample_of(run_panel(source, manifest, panel), cfg), inputs
    cfg = configured(config, measure)
    from levgap.ingest import read_panel

    return sample_of(read_panel(source, config=cfg), cfg), [source, *([config] if config
                                                                       else [])]


@app.command()
def adjust(
    source: Path = typer.Argument(..., help="A panel file, or a folder written by levgap "
                                  "analyze."),
    measure: str = typer.Option("both", "--measure", help="book, market or both."),
    config: Path = typer.Option(None, "--config", help="Run configuration (TOML; a panel)."),
    difference: int = typer.Option(None, "--difference", min=1,
                                   help="Years of the long difference (default 4)."),
    horizon: int = typer.Option(5, "--horizon", min=1, max=50,
                                help="Years of each firm's expected path."),
    out: Path = typer.Option(None, "--out",
                             help="Also write adjustment.csv and paths.csv here."),
    force: bool = typer.Option(False, "--force", help="Write into a folder holding other files."),
) -> None:
    """How fast do firms close the gap to their target? The partial-adjustment model
    L(t) - L(t-1) = speed x (target(t) - L(t-1)) + firm effect + e, by pooled least squares
    (biased slow), firm effects (biased fast in short panels) and the long-difference
    estimator (corrected); half-lives, published speeds beside them, and each firm's
    expected path toward its target.

    Example: levgap adjust results/ --measure book --out adjust/
    """
    with guard():
        from levgap.adjustment import published_lines, speed_of_adjustment

        notes: list[str] = []
        with collect_notes(notes):
            targets, inputs, measures = _targets_of(source, config, measure)
            result = speed_of_adjustment(targets, measures=measures, difference=difference,
                                         horizon=horizon)
        con = console()
        con.print(_adjust_table(result.table))
        con.print("Published (REFERENCES.md): " + "; ".join(published_lines()) + ".")
        for note in [*notes, *result.notes]:
            console(stderr=True).print(f"note: {note}")
        if out is not None:
            from levgap.report.tables import write_tables

            manifest = {"command": "adjust", "source": str(source), "inputs": [
                {"path": str(p)} for p in inputs],
                "options": {"measures": list(measures or ()), "difference": difference,
                            "horizon": horizon},
                "published": published_lines()}
            written = write_tables(result.tables(), manifest, out, force=force,
                                   inputs=inputs)
            echo(f"Outputs written to {out}/: {', '.join(p.name for p in written)}.")


def _targets_of(source: Path, config: Path | None, measure: str
                ) -> tuple[Any, list[Path], tuple[str, ...] | None]:
    measures = None if measure == "both" else parse_measures(measure)
    if source.is_dir():
        from levgap.report.tables import read_outputs

        tables, manifest = read_outputs(source, names=["targets"])
        if "targets" not in tables:
            raise typer.BadParameter(f"{source} holds no targets table (a folder of levgap "
                                     "analyze is needed).", param_hint="SOURCE")
        inputs = [Path(i["path"]) for i in manifest.get("inputs", [])
                  if isinstance(i, dict) and isinstance(i.get("path"), str)]
        return tables["targets"], inputs, measures
    from levgap.ingest import read_panel
    from levgap.pipeline import analyze

    cfg = configured(config, measure)
    result = analyze(read_panel(source, config=cfg), config=cfg)
    return result.targets, [source, *([config] if config else [])], measures


def _adjust_table(frame: Any) -> Any:
    from rich.table import Table

    from levgap import glossary as g
    from levgap.cli.common import plain

    table = Table(title=f"{g.capital(g.label('speed'))} toward the target (share of the gap "
                  "closed a year; 95% intervals; standard errors clustered by firm)",
                  title_justify="left")
    for key in ("measure", "estimator", "speed", "std_error", "ci", "half_life", "n_obs",
                "n_firms", "bias"):
        table.add_column(g.label(key) + (", years" if key == "half_life" else ""),
                         justify="left" if key in ("measure", "estimator", "bias")
                         else "right")
    for r in frame.itertuples():
        hl = "" if r.half_life != r.half_life else f"{r.half_life:.1f}"
        est = r.estimator + (f" (k = {int(r.difference)})" if r.difference else "")
        table.add_row(plain(r.measure), est, f"{r.speed:.3f}", f"{r.std_error:.3f}",
                      f"{r.ci_low:.3f} to {r.ci_high:.3f}", hl, f"{r.n_obs:,}",
                      f"{r.n_firms:,}", r.bias.split(":")[0].split(" (")[0])
    return table
