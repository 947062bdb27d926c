"""Frozen option objects for a run, and their TOML form.

A run configuration has four tables; every key is optional::

    [columns]            # schema column = the header in your file
    total_debt = "Debt (m)"

    [input]
    delimiter = ";"      # default: detected
    decimal = ","
    thousands = "."
    encoding = "utf-8"   # default: UTF-8 (BOM allowed), Latin-1 fallback with a warning
    sheet = "Panel"      # workbooks only; default: the first sheet
    skip_rows = 0        # lines above the header
    industry_names = "industry_names.csv"   # code,name: readable industry names
    peers = "peers.csv"  # firm_id,peer_id: a firm's own peers for the attribution
    sic_titles = true    # name 4- and 2-digit numeric codes by the SEC's SIC titles

    [units]
    scale = 1.0          # multiply every money column by this (0.001: thousands -> millions)
    currency = "EUR"     # reference currency, for the record and the labels
    unit = "millions"    # the money unit after scale, for the labels

    [industries]         # text labels: parent groups (pooling, peers) and names
    "Motor homes" = { parent = "Vehicles", name = "Motor homes and campers" }

    [model]
    measures = ["book", "market"]
    cluster = "firm"     # firm | firm-year | industry
    winsorize = [0.01, 0.99]
    min_industry_firms = 5
    industry_digits = 0  # industry effect: 0 the code as given; n its first n characters
    peer_digits = 0      # peer group (attribution): 0 the code as given; n its first n characters
    min_peers = 5        # fewer peers than this: flagged few_peers
    drivers = ["tangibility", "profitability", "earnings_volatility", "size", "market_to_book"]
    input_drivers = []   # numeric columns of the input used as drivers, as given
    effects = "industry,year"  # industry,year | firm,year | year | none
    estimator = "pooled"       # pooled | fama-macbeth (levgap estimate)
    fm_errors = "newey-west"   # Fama-MacBeth standard error: newey-west | plain
    # nw_lags = 2        # Newey-West lags (default: floor(4 (T/100)^(2/9)), at most T - 1)
    leases_as_debt = false
    folds = 5
    seed = 0
    coverage = 0.8
    model = "fractional"   # fractional | linear
    pooling = "shrink"     # shrink | parent
    band_prior_rows = 10
"""

from __future__ import annotations

import dataclasses
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, ClassVar

from levgap.errors import ConfigError
from levgap.fields import check_fields
from levgap.schema import BY_NAME, DRIVERS, MEASURES, OPTIONAL_DRIVERS

CLUSTERS: tuple[str, ...] = ("firm", "firm-year", "industry")
POOLINGS: tuple[str, ...] = ("shrink", "parent")
EFFECTS: tuple[str, ...] = ("industry,year", "firm,year", "year", "none")
"""Fixed effects a specification can absorb."""
ESTIMATORS: tuple[str, ...] = ("pooled", "fama-macbeth")
FM_ERRORS: tuple[str, ...] = ("newey-west", "plain")
RESERVED_COLUMNS: frozenset[str] = frozenset({
    "firm_id", "firm_name", "fiscal_year", "industry", "currency", "fx_rate", "total_assets",
    "total_debt", "market_equity", "book", "market", "effect_group", "peer_group",
    "source_row", "flags", "has_prior_year",
})
"""Names an input driver cannot take: columns the analysis builds or keys the panel."""
_MAX_TOML = 1 << 20
FILE_KEYS: tuple[str, ...] = ("industry_names", "peers")
"""Keys of ``[input]`` that name files (relative to the run configuration's folder)."""



DECIMAL_MARKS = (".", ",")
"""The decimal marks levgap reads (``[input] decimal``)."""
THOUSANDS_MARKS = (".", ",", " ", "\u00a0", "\u202f", "'")
"""The thousands marks levgap reads (``[input] thousands``; a space also takes no-break
spaces)."""

@dataclass(frozen=True, slots=True)
class InputOptions:
    """How to read a panel file.

    Parameters
    ----------
    delimiter : str or None, default=None
        Field separator of a CSV file; ``None`` detects it from the header line.
    decimal : str, default="."
        Decimal mark of numbers: ``.`` or ``,`` (``DECIMAL_MARKS``).
    thousands : str or None, default=None
        Thousands separator of numbers, if any (``THOUSANDS_MARKS``).
    encoding : str or None, default=None
        Text encoding; ``None`` reads UTF-8 (with or without BOM) and falls back to
        Latin-1 with a warning.
    sheet : str or None, default=None
        Worksheet of a workbook; ``None`` takes the first.
    skip_rows : int, default=0
        Lines above the header line.
    industry_names : str or None, default=None
        A CSV file of readable industry names (``code,name``); in a run configuration a
        relative path is taken from the configuration's folder.
    peers : str or None, default=None
        A CSV file of peer lists (``firm_id,peer_id``): a listed firm's attribution takes
        its listed peers instead of its peer group.
    sic_titles : bool, default=True
        Name numeric industry codes of four digits (and two-digit major groups) by the SEC's
        SIC titles shipped with levgap, where no other name is given. Turn off for other code
        lists (NAICS, ...).
    """

    TABLE: ClassVar[str] = "input"

    delimiter: str | None = None
    decimal: str = "."
    thousands: str | None = None
    encoding: str | None = None
    sheet: str | None = None
    skip_rows: int = 0
    industry_names: str | None = None
    peers: str | None = None
    sic_titles: bool = True

    def __post_init__(self) -> None:
        check_fields(self)
        for name in ("delimiter", "decimal", "thousands"):
            v = getattr(self, name)
            if v is not None and (not isinstance(v, str) or len(v) != 1 or v in "\r\n\""):
                raise ConfigError(
                    f"[input] {name} must be one character (not a quote or line break); "
                    f"got {v!r}."
                )
        if self.decimal in (self.delimiter, self.thousands) or (
            self.thousands is not None and self.thousands == self.delimiter
        ):
            raise ConfigError(
                f"[input] decimal, thousands and delimiter must differ; got decimal "
                f"{self.decimal!r}, thousands {self.thousands!r}, delimiter {self.delimiter!r}."
            )
        if self.decimal not in DECIMAL_MARKS:
            raise ConfigError(
                f"[input] decimal must be one of {', '.join(map(repr, DECIMAL_MARKS))}; got "
                f"{self.decimal!r} (a delimiter or quote character would split or join cells)."
            )
        if self.thousands is not None and self.thousands not in THOUSANDS_MARKS:
            raise ConfigError(
                f"[input] thousands must be one of {', '.join(map(repr, THOUSANDS_MARKS))}; "
                f"got {self.thousands!r} (a delimiter or quote character would split or join "
                "cells)."
            )
        for name in ("encoding", "sheet", "industry_names", "peers"):
            v = getattr(self, name)
            if v is not None and (not isinstance(v, str) or not v):
                raise ConfigError(f"[input] {name} must be a non-empty text; got {v!r}.")
        if self.skip_rows < 0:
            raise ConfigError(f"[input] skip_rows must be 0 or more; got {self.skip_rows}.")


@dataclass(frozen=True, slots=True)
class Units:
    """Money units of the input.

    Parameters
    ----------
    scale : float, default=1.0
        Every money column is multiplied by this on reading.
    currency : str or None, default=None
        Reference currency, recorded in ``run.json``.
    unit : str or None, default=None
        The money unit after ``scale`` in words (``"millions"``), for labels: money figures
        then read, say, "EUR millions".
    """

    TABLE: ClassVar[str] = "units"

    scale: float = 1.0
    currency: str | None = None
    unit: str | None = None

    def __post_init__(self) -> None:
        if isinstance(self.scale, int | float) and not isinstance(self.scale, bool) and not (
                0 < self.scale < float("inf")):
            raise ConfigError(f"[units] scale must be a number > 0; got {self.scale!r}.")
        check_fields(self)
        if self.unit is not None and not self.unit.strip():
            raise ConfigError(f"[units] unit must be a non-empty text such as 'millions'; got "
                              f"{self.unit!r}.")
        if self.currency is not None:
            from levgap.currencies import CURRENCIES

            code = self.currency.strip().upper()
            if code not in CURRENCIES:
                raise ConfigError(
                    f"[units] currency must be an ISO 4217 code such as 'EUR'; got "
                    f"{self.currency!r}."
                )
            object.__setattr__(self, "currency", code)


@dataclass(frozen=True, slots=True)
class ModelSpec:
    """What to estimate and how.

    Parameters
    ----------
    measures : tuple of str, default=("book", "market")
        Leverage measures to model.
    cluster : {"firm", "firm-year", "industry"}, default="firm"
        Clustering of the standard errors.
    winsorize : tuple of float, default=(0.01, 0.99)
        Quantiles at which drivers are clipped within each fiscal year; ``(0, 1)`` turns it off.
    min_industry_firms : int, default=5
        Industries with fewer firms borrow their effect from a parent group.
    industry_digits : int, default=0
        Level of the industry effect in the model: 0 uses the industry code as given; n > 0
        its first n characters (for example 2 for SIC major groups).
    peer_digits : int, default=0
        Peer group of the attribution (the peer median and driver profile): 0 uses the
        industry code as given; n > 0 its first n characters. Independent of the model's
        ``industry_digits``.
    min_peers : int, default=5
        A firm-year whose peer median rests on fewer peers is flagged ``few_peers``.
    drivers : tuple of str
        Drivers in the model: the five defaults and any of ``rd_intensity``,
        ``log_revenue``, ``industry_median_leverage``, ``dividend_payer``
        (``levgap.definitions`` says how each is built).
    input_drivers : tuple of str, default=()
        Numeric columns of the input file used as further drivers, as given (money columns
        after ``[units] scale`` and ``fx_rate``); a row without a value is left out (reason
        ``driver_missing``).
    effects : {"industry,year", "firm,year", "year", "none"}, default="industry,year"
        Fixed effects absorbed. Firm effects serve the estimation table only (``levgap
        estimate``): a firm's target would be its own average level, which a firm left out
        of the cross-fit does not have. ``industry_median_leverage`` needs a specification
        without industry effects.
    estimator : {"pooled", "fama-macbeth"}, default="pooled"
        ``pooled``: one fit on every firm-year (the target model). ``fama-macbeth``: one
        least-squares cross-section a fiscal year, slopes averaged (``levgap estimate``).
    fm_errors : {"newey-west", "plain"}, default="newey-west"
        Which Fama-MacBeth standard error fills ``std_error`` (both are written).
    nw_lags : int or None, default=None
        Newey-West lags of the Fama-MacBeth slopes; None: floor(4 (T/100)^(2/9)), at most
        T - 1, for T years.
    leases_as_debt : bool, default=False
        Add ``lease_liabilities`` to ``total_debt``.
    folds : int, default=5
        Folds of the grouped cross-fit.
    seed : int, default=0
        Seed of the fold assignment.
    coverage : float, default=0.8
        Coverage of the band around each target.
    model : str, default="fractional"
        Key of the fit function in ``levgap.models.MODELS``: ``fractional`` (Papke and
        Wooldridge's fractional logit, targets in [0, 1]) or ``linear`` (replication);
        checked when the spec is built.
    year : int or None, default=None
        Report only this fiscal year (the model is still fitted on every year).
    pooling : {"shrink", "parent"}, default="shrink"
        How an industry with fewer than ``min_industry_firms`` firms gets its effect: its
        parent group's plus its own deviation shrunk by empirical Bayes, or its parent's
        outright (levgap 0.1; for comparison).
    band_prior_rows : float, default=10.0
        Firm-years at which an industry's own residual spread gets half the weight in its
        band scale (the rest goes to the pooled scale).
    lag_drivers : bool, default=False
        Explain each year's leverage with the firm's drivers of the previous fiscal year, as
        replication studies often do; a row without the firm's previous year is left out with
        reason ``no_prior_year``.
    """

    TABLE: ClassVar[str] = "model"

    measures: tuple[str, ...] = MEASURES
    cluster: str = "firm"
    winsorize: tuple[float, float] = (0.01, 0.99)
    min_industry_firms: int = 5
    industry_digits: int = 0
    peer_digits: int = 0
    min_peers: int = 5
    drivers: tuple[str, ...] = DRIVERS
    input_drivers: tuple[str, ...] = ()
    effects: str = "industry,year"
    estimator: str = "pooled"
    fm_errors: str = "newey-west"
    nw_lags: int | None = None
    leases_as_debt: bool = False
    folds: int = 5
    seed: int = 0
    coverage: float = 0.8
    model: str = "fractional"
    year: int | None = None
    lag_drivers: bool = False
    pooling: str = "shrink"
    band_prior_rows: float = 10.0

    def __post_init__(self) -> None:
        check_fields(self)
        for key in ("measures", "drivers"):
            names = list(getattr(self, key))
            twice = [n for i, n in enumerate(names) if n in names[:i]]
            if twice:
                raise ConfigError(
                    f"[model] {key} must name each entry once; got {twice[0]!r} more than once "
                    f"in {names}."
                )
        bad = [m for m in self.measures if m not in MEASURES]
        if bad or not self.measures:
            raise ConfigError(
                f"[model] measures must be among {list(MEASURES)}; got {list(self.measures)}."
            )
        if self.cluster not in CLUSTERS:
            raise ConfigError(
                f"[model] cluster must be one of {list(CLUSTERS)}; got {self.cluster!r}.")
        lo, hi = self.winsorize
        if not (0.0 <= lo < hi <= 1.0):
            raise ConfigError(
                f"[model] winsorize must be two quantiles 0 <= low < high <= 1; got "
                f"{list(self.winsorize)}."
            )
        allowed = DRIVERS + OPTIONAL_DRIVERS
        bad = [d for d in self.drivers if d not in allowed]
        if bad or not (self.drivers or self.input_drivers):
            raise ConfigError(
                f"[model] drivers must be among {list(allowed)}; got {list(self.drivers)}."
            )
        self._check_research()
        if self.min_industry_firms < 1:
            raise ConfigError(
                f"[model] min_industry_firms must be at least 1; got {self.min_industry_firms}."
            )
        if self.industry_digits < 0:
            raise ConfigError(
                f"[model] industry_digits must be 0 or more; got {self.industry_digits}.")
        if self.peer_digits < 0:
            raise ConfigError(f"[model] peer_digits must be 0 or more; got {self.peer_digits}.")
        if self.min_peers < 1:
            raise ConfigError(f"[model] min_peers must be at least 1; got {self.min_peers}.")
        if self.folds < 2:
            raise ConfigError(f"[model] folds must be at least 2; got {self.folds}.")
        if self.seed < 0:
            raise ConfigError(f"[model] seed must be 0 or more; got {self.seed}.")
        if self.pooling not in POOLINGS:
            raise ConfigError(
                f"[model] pooling must be one of {list(POOLINGS)}; got {self.pooling!r}.")
        if not (0.0 <= self.band_prior_rows < float("inf")):
            raise ConfigError(
                f"[model] band_prior_rows must be a number >= 0; got {self.band_prior_rows}.")
        if not (0.0 < self.coverage < 1.0):
            raise ConfigError(
                f"[model] coverage must lie strictly between 0 and 1; got {self.coverage}.")
        if self.year is not None and not (1800 <= self.year <= 2200):
            raise ConfigError(f"[model] year must be a fiscal year 1800..2200; got {self.year}.")
        if self.model != ModelSpec.__dataclass_fields__["model"].default:
            # looked up only when another model is asked for: the models import scipy, which
            # `levgap check` must not pay for (the default is a key of MODELS, tested)
            from levgap.models import MODELS

            if self.model not in MODELS:
                raise ConfigError(
                    f"[model] model must be one of {sorted(MODELS)}; got {self.model!r}.")


    def _check_research(self) -> None:
        """Effects, estimator and input drivers (the replication options)."""
        effects = ",".join(p.strip() for p in str(self.effects).lower().split(","))
        if effects not in EFFECTS:
            raise ConfigError(f"[model] effects must be one of {list(EFFECTS)}; got "
                              f"{self.effects!r}.")
        object.__setattr__(self, "effects", effects)
        if "industry_median_leverage" in self.drivers and "industry" in effects:
            raise ConfigError(
                "[model] drivers must not hold industry_median_leverage with industry effects; "
                f"got effects = {effects!r}. The industry effects would absorb the industry "
                "median: set effects = \"year\" (Frank and Goyal's specification).")
        if self.estimator not in ESTIMATORS:
            raise ConfigError(f"[model] estimator must be one of {list(ESTIMATORS)}; got "
                              f"{self.estimator!r}.")
        if self.estimator == "fama-macbeth" and "firm" in effects:
            raise ConfigError(
                "[model] effects must not include firm with the fama-macbeth estimator; got "
                f"{effects!r}. A cross-section of one year cannot tell a firm's effect from "
                "its residual: use effects = \"year\" or \"industry,year\".")
        if self.fm_errors not in FM_ERRORS:
            raise ConfigError(f"[model] fm_errors must be one of {list(FM_ERRORS)}; got "
                              f"{self.fm_errors!r}.")
        if self.nw_lags is not None and self.nw_lags < 0:
            raise ConfigError(f"[model] nw_lags must be 0 or more; got {self.nw_lags}.")
        import re

        taken = set(DRIVERS + OPTIONAL_DRIVERS) | {"rd_missing"} | RESERVED_COLUMNS
        for name in self.input_drivers:
            if not re.fullmatch(r"[A-Za-z][A-Za-z0-9_]{0,63}", name) or name in taken or (
                    name.endswith("_raw")):
                raise ConfigError(
                    f"[model] input_drivers must name numeric columns of the input (letters, "
                    f"digits and _, not a driver levgap builds or a key column); got {name!r}.")
        if len(set(self.input_drivers)) != len(self.input_drivers):
            raise ConfigError(f"[model] input_drivers must not repeat a column; got "
                              f"{list(self.input_drivers)}.")
        if len(set(self.drivers)) != len(self.drivers):
            raise ConfigError(f"[model] drivers must not repeat a driver; got "
                              f"{list(self.drivers)}.")

    @property
    def absorbs(self) -> tuple[str, ...]:
        """The effects absorbed, in order (``("industry", "year")``; ``()`` for none)."""
        return () if self.effects == "none" else tuple(self.effects.split(","))

    @property
    def all_drivers(self) -> tuple[str, ...]:
        """The drivers asked for: built ones, then input columns."""
        return (*self.drivers, *self.input_drivers)


@dataclass(frozen=True, slots=True)
class Industry:
    """What the run configuration says about one industry label (``[industries]``).

    Parameters
    ----------
    parent : str or None, default=None
        Parent group: a small industry is pooled toward the industries with effects of their
        own that name the same parent, and looks for peers among them when it has none.
    name : str or None, default=None
        Readable name shown beside the label.
    """

    TABLE: ClassVar[str] = "industries"

    parent: str | None = None
    name: str | None = None

    def __post_init__(self) -> None:
        check_fields(self)
        for key in ("parent", "name"):
            v = getattr(self, key)
            if v is not None and not v.strip():
                raise ConfigError(f"[industries] {key} must be a non-empty text; got {v!r}.")


@dataclass(frozen=True, slots=True)
class RunConfig:
    """Everything a run needs besides the data.

    Parameters
    ----------
    columns : dict of str to str
        Schema column -> header in the user's file.
    input : InputOptions
    units : Units
    model : ModelSpec
    source : str or None
        Path of the TOML file this came from.
    industries : dict of str to Industry
        Industry label (as the model's industry level shows it) -> its parent group and name
        (``[industries]``; names from ``[input] industry_names`` are merged in when the run
        starts).
    peers : dict of str to tuple of str
        Firm id -> the firm ids of its own peers (from ``[input] peers``, read when the run
        starts, or given directly).
    """

    columns: dict[str, str] = field(default_factory=dict)
    input: InputOptions = field(default_factory=InputOptions)
    units: Units = field(default_factory=Units)
    model: ModelSpec = field(default_factory=ModelSpec)
    source: str | None = None
    industries: dict[str, Industry] = field(default_factory=dict)
    peers: dict[str, tuple[str, ...]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if not isinstance(self.columns, dict):
            raise ConfigError(f"[columns] must be a table of schema column = header; got "
                              f"{self.columns!r}.")
        bad = sorted(str(k) for k in self.columns if k not in BY_NAME)
        if bad:
            raise ConfigError(
                f"unknown key {bad[0]!r} in [columns]; allowed keys are the schema columns "
                f"{sorted(BY_NAME)}."
            )
        for k, v in self.columns.items():
            if not isinstance(v, str) or not v.strip():
                raise ConfigError(f"[columns] {k} must be a header name; got {v!r}.")
        by_header: dict[str, list[str]] = {}
        for k, v in self.columns.items():
            by_header.setdefault(v.strip().lower(), []).append(k)
        shared = [ks for ks in by_header.values() if len(ks) > 1]
        if shared:
            ks = shared[0]
            raise ConfigError(
                f"[columns] {' and '.join(ks)} must name different headers; got each = "
                f"{self.columns[ks[0]]!r}. Map each schema column to its own header."
            )
        for name, kind in (("input", InputOptions), ("units", Units), ("model", ModelSpec)):
            if not isinstance(getattr(self, name), kind):
                raise ConfigError(f"[{name}] must be a {kind.__name__}; got "
                                  f"{getattr(self, name)!r}.")
        if not isinstance(self.industries, dict) or not all(
                isinstance(k, str) and isinstance(v, Industry)
                for k, v in self.industries.items()):
            raise ConfigError("[industries] must map industry labels to Industry entries; got "
                              f"{self.industries!r}.")
        if not isinstance(self.peers, dict) or not all(
                isinstance(k, str) and isinstance(v, tuple) and all(isinstance(p, str) for p in v)
                for k, v in self.peers.items()):
            raise ConfigError("peers must map firm ids to tuples of peer firm ids; got "
                              f"{type(self.peers).__name__}.")

    @classmethod
    def from_toml(cls, path: str | Path) -> RunConfig:
        """Read a run configuration; unknown tables or keys are an error naming them.

        The file is UTF-8 (a byte-order mark is allowed) and at most 1 MB.
        """
        import stat

        p = Path(path)
        try:
            if not stat.S_ISREG(p.stat().st_mode):
                raise ConfigError(f"{p}: the run configuration must be a regular file; got a "
                                  "folder, device or pipe.")
            with open(p, "rb") as fh:
                data = fh.read(_MAX_TOML + 1)
        except FileNotFoundError:
            raise ConfigError(
                f"{p}: the run configuration must be an existing TOML file; got no file there. "
                "Check the --config path, or write an example with `levgap template`."
            ) from None
        except OSError as exc:
            raise ConfigError(f"{p}: the run configuration must be readable; got "
                              f"{exc.strerror or exc}.") from None
        if len(data) > _MAX_TOML:
            raise ConfigError(f"{p}: a run configuration must be at most 1 MB; got a larger "
                              "file. Is this the right --config file?")
        try:
            raw = tomllib.loads(data.decode("utf-8-sig"))
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise ConfigError(f"{p}: not a valid TOML file: {exc}.") from None
        inp = raw.get("input")
        if isinstance(inp, dict):  # file names are taken from the configuration's folder
            raw["input"] = {k: (str(p.parent / v) if k in FILE_KEYS and isinstance(v, str)
                                and v.strip() and not Path(v).is_absolute() else v)
                            for k, v in inp.items()}
        return cls.from_dict(raw, source=str(p))

    @classmethod
    def from_dict(cls, raw: dict[str, Any], *, source: str | None = None) -> RunConfig:
        """Build from the parsed TOML tables (see the module docstring)."""
        where = f"{source}: " if source else ""
        tables = {"columns", "input", "units", "model", "industries"}
        unknown = sorted(set(raw) - tables)
        if unknown:
            raise ConfigError(
                f"{where}unknown table [{unknown[0]}]; allowed tables are {sorted(tables)}."
            )
        columns = raw.get("columns", {})
        if not isinstance(columns, dict):
            raise ConfigError(f"{where}[columns] must be a table of keys; got {columns!r}.")
        parts = {
            "input": _build(InputOptions, raw.get("input", {}), "input", where),
            "units": _build(Units, raw.get("units", {}), "units", where),
            "model": _build(ModelSpec, raw.get("model", {}), "model", where),
        }
        industries = raw.get("industries", {})
        if not isinstance(industries, dict):
            raise ConfigError(f"{where}[industries] must be a table of label = {{ parent = "
                              f"..., name = ... }}; got {industries!r}.")
        entries = {}
        for label, value in industries.items():
            if not isinstance(value, dict):
                raise ConfigError(
                    f"{where}[industries] {label!r} must be a table such as {{ parent = "
                    f"\"Vehicles\", name = \"Motor homes\" }}; got {value!r}.")
            entries[str(label).strip()] = _build(Industry, value, "industries", where)
        try:
            return cls(columns=dict(columns), source=source, industries=entries, **parts)
        except ConfigError as exc:
            raise ConfigError(f"{where}{exc}") from None

    def to_dict(self) -> dict[str, Any]:
        """The resolved configuration, as echoed into ``run.json``."""
        return {
            "columns": dict(self.columns),
            "input": dataclasses.asdict(self.input),
            "units": dataclasses.asdict(self.units),
            "model": {
                k: (list(v) if isinstance(v, tuple) else v)
                for k, v in dataclasses.asdict(self.model).items()
            },
            "industries": {k: {f: x for f, x in dataclasses.asdict(v).items() if x is not None}
                           for k, v in self.industries.items()},
            "source": self.source,
        }


def _build(kind: type, values: Any, table: str, where: str) -> Any:
    if not isinstance(values, dict):
        raise ConfigError(f"{where}[{table}] must be a table of keys; got {values!r}.")
    fields = {f.name for f in dataclasses.fields(kind)}
    unknown = sorted(set(values) - fields)
    if unknown:
        raise ConfigError(
            f"{where}unknown key {unknown[0]!r} in [{table}]; allowed keys are {sorted(fields)}."
        )
    try:
        return kind(**values)
    except ConfigError as exc:
        if where and not str(exc).startswith(where):
            raise ConfigError(f"{where}{exc}") from None
        raise
