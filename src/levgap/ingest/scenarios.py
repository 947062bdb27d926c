"""Reading a deal scenario file (TOML) into checked :class:`~levgap.deal.scenario.Scenario`s."""

from __future__ import annotations

import tomllib
from pathlib import Path

from levgap.deal.scenario import Scenario, parse_scenarios
from levgap.errors import ConfigError

MAX_BYTES = 1 << 20
"""A scenario file is a few hundred lines at most; a larger file is refused unread."""


def read_scenarios(path: str | Path) -> tuple[Scenario, ...]:
    """Read and check a scenario file.

    Parameters
    ----------
    path : str or pathlib.Path
        A TOML file with an optional ``[assumptions]`` table and ``[[scenario]]`` tables (see
        ``data_templates/deal.toml``).

    Returns
    -------
    tuple of Scenario

    Raises
    ------
    ConfigError
        The file is missing, too large, not UTF-8 TOML, or a key is wrong; one line naming
        the file (and the scenario and key).
    """
    p = Path(path)
    try:
        if p.is_dir():
            raise ConfigError(f"{p}: the scenario file must be a TOML file; got a folder.")
        with open(p, "rb") as fh:
            data = fh.read(MAX_BYTES + 1)
    except FileNotFoundError:
        raise ConfigError(
            f"{p}: the scenario file must exist; got no file there. `levgap template` writes "
            "an annotated example, deal.toml."
        ) from None
    except OSError as exc:
        raise ConfigError(f"{p}: the scenario file must be readable; got "
                          f"{exc.strerror or exc}.") from None
    if len(data) > MAX_BYTES:
        raise ConfigError(f"{p}: a scenario file must be at most 1 MB; got more.")
    try:
        text = data.decode("utf-8-sig")
        raw = tomllib.loads(text)
    except UnicodeDecodeError:
        raise ConfigError(f"{p}: the scenario file must be UTF-8 text; got other bytes.") \
            from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{p}: not a valid TOML file: {exc}.") from None
    return parse_scenarios(raw, source=str(p))
