"""Read and check a run configuration (TOML). Every problem names the file and the key."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from euphotic import screen
from euphotic.errors import ConfigError
from euphotic.models import MODELS
from euphotic.readers import InputSpec
from euphotic.regions import Region, regions_from_config

_INPUT_KEYS = {"files", "variable", "units", "date_pattern", "date_format", "period"}
_INPUT_KEYS |= screen.INPUT_KEYS  # input screening: duplicates, valid_range (euphotic.screen)
_RUN_KEYS = {
    "models",
    "model",
    "output_dir",
    "start",
    "end",
    "earth",
    "figures",
    "title",
    "output_format",
    "months_per_compute",
}
_OCEAN_KEYS = {"source", "land_mask", "variable"}


@dataclass
class RunConfig:
    """Everything a run needs, with paths resolved against the config file's folder."""

    path: Path
    inputs: dict[str, InputSpec]
    regions: list[Region]
    models: list[str] = field(default_factory=lambda: ["vgpm"])
    output_dir: Path = Path("euphotic_output")
    start: np.datetime64 | None = None
    end: np.datetime64 | None = None  # inclusive
    earth: str = "sphere"
    figures: bool = True
    title: str = "Ocean net primary production"
    output_format: str = "netcdf"  # "netcdf" or "zarr"
    #: months (x models) in each computed graph; 0: the whole run in one graph
    months_per_compute: int = 1
    ocean_source: str = "package"  # "package", "file" or "temperature"
    land_mask: Path | None = None
    land_mask_variable: str | None = None


def _date(value, where: str, key: str) -> np.datetime64:
    try:
        return np.datetime64(str(value), "D")
    except ValueError:
        raise ConfigError(where, f"`{key}` = {value!r} is not a date (YYYY-MM-DD)") from None


def _check_keys(table: dict, allowed: set, where: str) -> None:
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise ConfigError(
            where, f"unknown key(s) {', '.join(unknown)}; allowed: {', '.join(sorted(allowed))}"
        )


def load_config(path: str | Path) -> RunConfig:
    """Parse and check a TOML run configuration."""
    path = Path(path)
    try:
        text = path.read_text()
    except OSError as exc:
        raise ConfigError(path, f"cannot read config ({exc.strerror or exc})") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(path, f"not valid TOML: {exc}") from None
    base = path.resolve().parent
    _check_keys(raw, {"run", "inputs", "ocean", "regions"}, str(path))

    run = raw.get("run", {})
    _check_keys(run, _RUN_KEYS, f"{path} [run]")
    models = run.get("models", run.get("model", ["vgpm"]))
    if isinstance(models, str):
        models = [models]
    for m in models:
        if m not in MODELS:
            raise ConfigError(
                f"{path} [run]", f"unknown model {m!r}; choose from {', '.join(sorted(MODELS))}"
            )
    output_format = run.get("output_format", "netcdf")
    if output_format not in ("netcdf", "zarr"):
        raise ConfigError(
            f"{path} [run]", f"`output_format` must be 'netcdf' or 'zarr', not {output_format!r}"
        )
    per = run.get("months_per_compute", 1)
    if not isinstance(per, int) or isinstance(per, bool) or per < 0:
        raise ConfigError(
            f"{path} [run]", f"`months_per_compute` must be a whole number >= 0, not {per!r}"
        )
    earth = run.get("earth", "sphere")
    if earth not in ("sphere", "wgs84"):
        raise ConfigError(f"{path} [run]", f"`earth` must be 'sphere' or 'wgs84', not {earth!r}")

    inputs_raw = raw.get("inputs")
    if not isinstance(inputs_raw, dict):
        raise ConfigError(path, "missing [inputs] with [inputs.chl], [inputs.par] and [inputs.sst]")
    inputs: dict[str, InputSpec] = {}
    for role in ("chl", "par", "sst", "day_length"):
        table = inputs_raw.get(role)
        if table is None:
            if role == "day_length":
                continue
            raise ConfigError(path, f"missing [inputs.{role}] with `files`")
        _check_keys(table, _INPUT_KEYS, f"{path} [inputs.{role}]")
        if "files" not in table:
            raise ConfigError(f"{path} [inputs.{role}]", "missing `files` (a path or glob pattern)")
        inputs[role] = InputSpec(
            role=role,
            files=table["files"],
            variable=table.get("variable"),
            units=table.get("units"),
            date_pattern=table.get("date_pattern"),
            date_format=table.get("date_format", "%Y%m%d"),
            period=table.get("period"),
            base_dir=base,
            **screen.input_options(table, role, f"{path} [inputs.{role}]"),
        )
    extra = sorted(set(inputs_raw) - {"chl", "par", "sst", "day_length"})
    if extra:
        raise ConfigError(f"{path} [inputs]", f"unknown input(s) {', '.join(extra)}")

    ocean = raw.get("ocean", {})
    _check_keys(ocean, _OCEAN_KEYS, f"{path} [ocean]")
    land_mask = ocean.get("land_mask")
    source = ocean.get("source", "file" if land_mask else "package")
    if source not in ("file", "package", "temperature"):
        raise ConfigError(
            f"{path} [ocean]",
            f"`source` must be 'file', 'package' or 'temperature', not {source!r}",
        )
    if source == "file" and not land_mask:
        raise ConfigError(f"{path} [ocean]", "source = 'file' needs `land_mask`")

    regions_raw = raw.get("regions", [])
    if not isinstance(regions_raw, list):
        raise ConfigError(path, "regions must be an array of tables ([[regions]])")
    regions = regions_from_config(regions_raw, base, str(path))
    if len(regions) > 64:
        raise ConfigError(path, f"{len(regions)} regions: at most 64 per run")

    cfg = RunConfig(
        path=path,
        inputs=inputs,
        regions=regions,
        models=list(models),
        output_dir=(base / run.get("output_dir", "euphotic_output")).resolve(),
        earth=earth,
        figures=bool(run.get("figures", True)),
        title=str(run.get("title", "Ocean net primary production")),
        output_format=output_format,
        months_per_compute=per,
        ocean_source=source,
        land_mask=(base / land_mask).resolve() if land_mask else None,
        land_mask_variable=ocean.get("variable"),
    )
    if "start" in run:
        cfg.start = _date(run["start"], f"{path} [run]", "start")
    if "end" in run:
        cfg.end = _date(run["end"], f"{path} [run]", "end")
    if cfg.start is not None and cfg.end is not None and cfg.end < cfg.start:
        raise ConfigError(f"{path} [run]", "`end` is before `start`")
    return cfg
