"""Connection settings for the server engines.

Each value comes from, in rising precedence: the defaults (the local test servers), the TOML
file named by ``REXPR_ENGINES_CONFIG`` (a ``[postgres]`` and/or ``[mariadb]`` table), then
environment variables ``REXPR_POSTGRES_<KEY>`` / ``REXPR_MARIADB_<KEY>``. Keys: host, port,
user, password, database, connect_timeout (seconds), statement_timeout (seconds; the server
cancels longer statements, so nothing hangs).
"""

from __future__ import annotations

import dataclasses
import os
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

from rexpr.errors import InputProblem

CONFIG_VARIABLE = "REXPR_ENGINES_CONFIG"


@dataclass(frozen=True)
class ServerSettings:
    host: str
    port: int
    user: str
    password: str
    database: str
    connect_timeout: float = 3.0
    statement_timeout: float = 120.0

    def describe(self) -> str:
        """Where it connects, without the password."""
        return f"{self.user}@{self.host}:{self.port}/{self.database}"


DEFAULTS: dict[str, ServerSettings] = {
    "postgres": ServerSettings("127.0.0.1", 5432, "postgres", "", "test"),
    "mariadb": ServerSettings("127.0.0.1", 3306, "root", "", "test"),
}
_ENV_PREFIX = {"postgres": "REXPR_POSTGRES_", "mariadb": "REXPR_MARIADB_"}
_KEYS = tuple(f.name for f in dataclasses.fields(ServerSettings))


def server_settings(engine: str, environ: Mapping[str, str] | None = None) -> ServerSettings:
    environ = os.environ if environ is None else environ
    if engine not in DEFAULTS:
        raise InputProblem(f"no connection settings for engine {engine!r}; server engines: {', '.join(DEFAULTS)}",
                           code="unknown_engine")
    values: dict[str, object] = dataclasses.asdict(DEFAULTS[engine])
    config_path = environ.get(CONFIG_VARIABLE)
    if config_path:
        values.update(_from_file(Path(config_path), engine))
    prefix = _ENV_PREFIX[engine]
    for key in _KEYS:
        if prefix + key.upper() in environ:
            values[key] = environ[prefix + key.upper()]
    return _build(values, f"settings for {engine}")


def _from_file(path: Path, engine: str) -> dict[str, object]:
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputProblem(f"{CONFIG_VARIABLE} names {str(path)!r}, which does not exist",
                           code="invalid_engine_config") from None
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InputProblem(f"cannot read engine config {str(path)!r}: {exc}", code="invalid_engine_config") from None
    section = data.get(engine, {})
    if not isinstance(section, dict):
        raise InputProblem(f"engine config {str(path)!r}: [{engine}] must be a table", code="invalid_engine_config")
    unknown = sorted(set(section) - set(_KEYS))
    if unknown:
        raise InputProblem(f"engine config {str(path)!r}: unknown key(s) {', '.join(unknown)} in [{engine}]; "
                           f"known: {', '.join(_KEYS)}", code="invalid_engine_config")
    return dict(section)


def _build(values: dict[str, object], where: str) -> ServerSettings:
    try:
        port = int(values["port"])  # type: ignore[call-overload]
        connect_timeout = float(values["connect_timeout"])  # type: ignore[arg-type]
        statement_timeout = float(values["statement_timeout"])  # type: ignore[arg-type]
    except (TypeError, ValueError) as exc:
        raise InputProblem(f"{where}: port and timeouts must be numbers ({exc})", code="invalid_engine_config") from None
    if not 0 < port < 65536 or connect_timeout <= 0 or statement_timeout <= 0:
        raise InputProblem(f"{where}: port must be 1-65535 and timeouts positive", code="invalid_engine_config")
    return ServerSettings(str(values["host"]), port, str(values["user"]), str(values["password"]),
                          str(values["database"]), connect_timeout, statement_timeout)
