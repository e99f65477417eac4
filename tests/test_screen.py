"""Input screening: repeated and overlapping periods, implausible values, kelvin labelled
Celsius, all-missing files and damaged chunks (euphotic.screen, the readers and the run).

Every fault file is written by the tests themselves into ``tmp_path``. Sources of the checked
values, beside each check:

* Python's standard library ``zlib`` (the reference inflater) gives the exact message of a
  damaged deflate stream; ``h5py`` gives the byte offset of a stored chunk (HDF5 chunk index).
* The default ranges are those of ``euphotic.screen.DEFAULT_VALID_RANGE``, taken from the role
  catalogue ``euphotic.roles`` (bases written there: chlorophyll 0.001-100 mg m-3 from common Level-3 products, from memory; SST above the
  freezing point of sea water, about -1.9 degC at salinity 35, UNESCO 1983).
* 0 degC = 273.15 K (SI definition of the Celsius scale).
* Counts and percentages are worked out by hand from the cells written (stated beside each).
"""

from __future__ import annotations

import csv
import logging
import os
import pickle
import subprocess
import sys
import zlib
from pathlib import Path

import dask
import h5py
import netCDF4
import numpy as np
import pytest
from click.testing import CliRunner

from euphotic import screen
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.errors import ConfigError, DuplicatePeriodError, InputFileError
from euphotic.readers import InputSpec, open_input

from ._grids import CHL_STD, PAR_STD, SST_STD, box_run_config, grid, write_field

LAT, LON = grid(0.0, 4.0, 0.0, 4.0, 0.5)  # 8 x 8 cells of 0.5 degree: 64 values per file
SHAPE = (len(LAT), len(LON))
ROLE = {"chl": ("chl", CHL_STD, "mg m-3"), "par": ("par", PAR_STD, "einstein m-2 day-1"),
        "sst": ("sst", SST_STD, "degC")}
BASE = {"chl": 0.3, "par": 30.0, "sst": 15.0}


def _file(tmp: Path, role: str, name: str, start: str, values=None, *, end: str | None = None,
          units: str | None = None) -> Path:
    """One daily (or [start, end] inclusive) field of ``role`` dated by ACDD attributes."""
    var, std, u = ROLE[role]
    vals = np.full(SHAPE, BASE[role]) if values is None else np.asarray(values, float)
    return write_field(tmp / role / name, var, std, units or u, vals, LAT, LON, start=start,
                       end=end or start)


def _case(tmp: Path, days=("2024-03-01",), **cfg_extra) -> Path:
    """Constant chl 0.3, PAR 30, SST 15 for each day; config over chl/, par/, sst/."""
    for d in days:
        for role in ("chl", "par", "sst"):
            _file(tmp, role, f"{role}_{d.replace('-', '')}.nc", d)
    cfg = box_run_config(tmp / "run.toml", "Box", [0.0, 0.0, 4.0, 4.0])
    for table, lines in cfg_extra.items():
        text = cfg.read_text().replace(f"[inputs.{table}]\n", f"[inputs.{table}]\n{lines}\n")
        cfg.write_text(text)
    return cfg


def _run(cfg: Path, *extra: str):
    return CliRunner().invoke(main, ["run", str(cfg), "-q", *extra])


def _totals(out: Path) -> list[float]:
    with open(out / "regional_totals.csv") as fh:
        return [float(r["total_TgC"]) for r in csv.DictReader(fh)]


def _outputs(out: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(out.iterdir())} if out.exists() else {}


@pytest.fixture
def warned():
    """The warning lines of the ``euphotic`` logger during a test (the CLI's own stderr
    handler is then not installed; the real stderr line is checked in a subprocess test)."""
    log = logging.getLogger("euphotic")
    lines: list[str] = []

    class Keep(logging.Handler):
        def emit(self, record):
            lines.append(record.getMessage())

    handler = Keep(level=logging.WARNING)
    old_level = log.level
    log.addHandler(handler)
    log.setLevel(logging.WARNING)
    yield lines
    log.removeHandler(handler)
    log.setLevel(old_level)


# ------------------------------------------------------------------------------------------
# repeated periods
# ------------------------------------------------------------------------------------------


def _two_for_one_day(tmp: Path) -> tuple[Path, Path]:
    a = _file(tmp, "chl", "chl_20240301_a.nc", "2024-03-01", np.full(SHAPE, 0.3))
    b = _file(tmp, "chl", "chl_20240301_b.nc", "2024-03-01", np.full(SHAPE, 2.0))
    return a, b


def test_two_files_for_one_day_is_an_error_naming_both(tmp_path):
    cfg = _case(tmp_path)
    (tmp_path / "chl" / "chl_20240301.nc").unlink()
    a, b = _two_for_one_day(tmp_path)
    res = _run(cfg)
    assert res.exit_code == 1
    assert res.stderr.strip() == (
        f'euphotic: error: {a}: chl period 2024-03-01 is given 2 times, by {a}, {b}; keep one '
        f'file per period or set duplicates = "first" or "last" in [inputs.chl]'
    )
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize(("rule", "used"), [("first", "a"), ("last", "b")])
def test_duplicates_rule_uses_the_documented_file(tmp_path, warned, rule, used):
    cfg = _case(tmp_path, chl=f'duplicates = "{rule}"')
    (tmp_path / "chl" / "chl_20240301.nc").unlink()
    a, b = _two_for_one_day(tmp_path)
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    chosen, other = (a, b) if used == "a" else (b, a)
    assert warned == [f'chl 2024-03-01: 2 files for one period; used {chosen} '
                      f'(duplicates = "{rule}"), ignored {other}']
    got = _totals(tmp_path / "out")
    # Reference: the same run with only the chosen file present.
    ref = tmp_path / "ref"
    cfg_ref = _case(ref)
    (ref / "chl" / "chl_20240301.nc").unlink()
    os.link(chosen, ref / "chl" / chosen.name)
    assert _run(cfg_ref).exit_code == 0
    assert got == _totals(ref / "out")
    assert got[0] > 0


def test_byte_identical_duplicates_are_used_once_with_a_note(tmp_path, warned):
    cfg = _case(tmp_path)
    first = tmp_path / "chl" / "chl_20240301.nc"
    copy = tmp_path / "chl" / "chl_20240301_copy.nc"
    copy.write_bytes(first.read_bytes())
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    assert warned == [f"chl 2024-03-01: 2 identical files for one period; used {first}"]


def test_find_duplicates_and_overlaps_on_periods():
    d = np.datetime64
    starts = np.array([d("2024-03-01"), d("2024-03-01"), d("2024-03-02"), d("2024-03-01"),
                       d("2024-03-05")], "datetime64[D]")
    ends = np.array([d("2024-03-02"), d("2024-03-02"), d("2024-03-03"), d("2024-03-09"),
                     d("2024-03-13")], "datetime64[D]")
    files = ["d1a", "d1b", "d2", "comp8", "comp8b"]
    dups = screen.find_duplicates(starts, ends, files)
    assert [(x.indices, x.files) for x in dups] == [((0, 1), ("d1a", "d1b"))]
    pairs = {(o.file_a, o.file_b) for o in screen.find_overlaps(starts, ends, files)}
    # By hand: comp8 [03-01, 03-09) covers d1a, d1b, d2 and shares 03-05..03-08 with comp8b
    # [03-05, 03-13); d1a/d1b are identical periods (duplicates, not overlaps).
    assert pairs == {("d1a", "comp8"), ("d1b", "comp8"), ("comp8", "d2"), ("comp8", "comp8b")}


# ------------------------------------------------------------------------------------------
# overlapping composites
# ------------------------------------------------------------------------------------------


def test_composite_over_daily_files_is_logged_once(tmp_path, warned):
    days = [f"2024-03-0{i}" for i in range(1, 4)]
    cfg = _case(tmp_path, days=days)
    comp = _file(tmp_path, "chl", "chl_8day_20240301.nc", "2024-03-01", end="2024-03-08")
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    d1 = tmp_path / "chl" / "chl_20240301.nc"
    # 4 periods involved: the composite and the three daily files it covers.
    assert warned == [
        f"chl: 4 periods overlap others (e.g. {d1} 2024-03-01 and {comp} 2024-03-01..2024-03-08);"
        " for each day the shortest period covering it is used, then the one starting latest"
    ]


# ------------------------------------------------------------------------------------------
# impossible values: masked, counted, warned, recorded
# ------------------------------------------------------------------------------------------


def test_chlorophyll_500_is_masked_counted_and_recorded(tmp_path, warned):
    cfg = _case(tmp_path)
    bad = np.full(SHAPE, 0.3)
    bad[3, 4] = 500.0  # no valid_max in the file; 500 mg m-3 is above the 100 default
    _file(tmp_path, "chl", "chl_20240301.nc", "2024-03-01", bad)
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    # 1 of 64 values: 1.5625 % -> "1.6 %"
    assert warned == ["chl 2024-03: 1 value above 100 mg m-3 masked (1.6 %)"]
    with netCDF4.Dataset(tmp_path / "out" / "npp_vgpm_2024-03.nc") as ds:
        assert ds.getncattr("screen_chl_values_above_range") == 1
        assert ds.getncattr("screen_chl_values_below_range") == 0
        assert ds.getncattr("screen_chl_values_in_range") == 63
        np.testing.assert_array_equal(ds.getncattr("screen_chl_valid_range"), [0.001, 100.0])
        assert ds.getncattr("screen_sst_values_in_range") == 64
    # The total equals a run where that cell is simply missing.
    ref = tmp_path / "ref"
    cfg_ref = _case(ref)
    miss = np.full(SHAPE, 0.3)
    miss[3, 4] = -999.0  # the _FillValue of write_field
    _file(ref, "chl", "chl_20240301.nc", "2024-03-01", miss)
    assert _run(cfg_ref).exit_code == 0
    assert _totals(tmp_path / "out") == _totals(ref / "out")


def test_sst_60_is_masked_and_counted(tmp_path, warned):
    cfg = _case(tmp_path)
    hot = np.full(SHAPE, 15.0)
    hot[0, 0] = 60.0
    hot[0, 1] = -3.0  # below the freezing point of sea water (about -1.9 degC at 35 psu)
    _file(tmp_path, "sst", "sst_20240301.nc", "2024-03-01", hot)
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    # 2 of 64 values: 3.125 % -> "3.1 %"
    assert warned == ["sst 2024-03: 1 value below -2.5 degC and 1 value above 40 degC masked "
                      "(3.1 %)"]


def test_valid_range_from_config_keeps_high_chlorophyll(tmp_path, warned):
    cfg = _case(tmp_path, chl="valid_range = [0.001, 1000]")
    bad = np.full(SHAPE, 0.3)
    bad[3, 4] = 500.0
    _file(tmp_path, "chl", "chl_20240301.nc", "2024-03-01", bad)
    assert _run(cfg).exit_code == 0
    assert warned == []
    with netCDF4.Dataset(tmp_path / "out" / "npp_vgpm_2024-03.nc") as ds:
        assert ds.getncattr("screen_chl_values_in_range") == 64
        np.testing.assert_array_equal(ds.getncattr("screen_chl_valid_range"), [0.001, 1000.0])


@pytest.mark.parametrize(("line", "message"), [
    ('duplicates = "newest"', "`duplicates` must be 'error', 'first' or 'last', not 'newest'"),
    ("valid_range = [5, 1]",
     "`valid_range` must be [low, high] with low < high (in mg m-3), not [5, 1]"),
    ('valid_range = "0..5"',
     "`valid_range` must be [low, high] with low < high (in mg m-3), not '0..5'"),
])
def test_bad_screening_keys(tmp_path, line, message):
    cfg = _case(tmp_path, chl=line)
    with pytest.raises(ConfigError) as excinfo:
        load_config(cfg)
    assert str(excinfo.value) == f"{cfg} [inputs.chl]: {message}"


def test_same_field_in_kelvin_and_celsius_screens_alike(tmp_path):
    c = np.full(SHAPE, 15.0)
    c[0, :3] = [45.0, -3.0, np.nan]  # one above, one below, one missing
    k = c + 273.15  # 0 degC = 273.15 K (SI)
    write_field(tmp_path / "c.nc", "sst", SST_STD, "degC", c, LAT, LON, start="2024-03-01",
                end="2024-03-01")
    write_field(tmp_path / "k.nc", "sst", SST_STD, "K", k, LAT, LON, start="2024-03-01",
                end="2024-03-01")
    got = []
    for name in ("c.nc", "k.nc"):
        da = open_input(InputSpec(role="sst", files=str(tmp_path / name)))
        counts = da.attrs["screen_counts"]
        got.append((da.values, *dask.compute(counts.below, counts.above, counts.valid)))
    np.testing.assert_allclose(got[0][0], got[1][0], atol=1e-4)  # float32 of 288.15 K
    for a, b in zip(got[0][1:], got[1][1:], strict=True):
        np.testing.assert_array_equal(a, b)
    assert [int(x[0]) for x in got[0][1:]] == [1, 1, 61]  # by hand: 64 - 3 - 0 missing


def test_opening_and_counting_compute_nothing(tmp_path, no_compute):
    cfg = _case(tmp_path, days=("2024-03-01", "2024-03-02"))
    with no_compute:
        spec = load_config(cfg).inputs["sst"]
        da = open_input(spec)
        report = screen.Report({"sst": da})
        lazy = report.lazy([np.datetime64("2024-03", "M")])
    assert da.attrs["period_files"] == [str(tmp_path / "sst" / "sst_20240301.nc"),
                                        str(tmp_path / "sst" / "sst_20240302.nc")]
    (computed,) = dask.compute(lazy)
    attrs = report.finish([np.datetime64("2024-03", "M")], computed)
    assert attrs[np.datetime64("2024-03", "M")]["screen_sst_values_in_range"] == 128


# ------------------------------------------------------------------------------------------
# kelvin labelled Celsius
# ------------------------------------------------------------------------------------------


def _kelvin_values() -> np.ndarray:
    return np.linspace(279.1, 293.4, SHAPE[0] * SHAPE[1]).reshape(SHAPE)


def test_kelvin_labelled_celsius_is_an_error_and_keeps_old_outputs(tmp_path):
    cfg = _case(tmp_path)
    assert _run(cfg).exit_code == 0
    before = _outputs(tmp_path / "out")
    assert "npp_vgpm_2024-03.nc" in before
    sst = _file(tmp_path, "sst", "sst_20240301.nc", "2024-03-01", _kelvin_values())
    res = _run(cfg)
    assert res.exit_code == 1
    assert res.stderr.strip() == (
        f"euphotic: error: {sst}: sea_surface_temperature values 279.1..293.4 look like kelvin "
        "but units say 'degC'; fix the units attribute or set units = \"K\" in [inputs.sst]"
    )
    assert _outputs(tmp_path / "out") == before  # same names, same bytes, no temporaries


def test_kelvin_in_a_later_file_of_a_series_is_named(tmp_path):
    cfg = _case(tmp_path, days=("2024-03-01", "2024-03-02", "2024-03-03"))
    sst = _file(tmp_path, "sst", "sst_20240302.nc", "2024-03-02", _kelvin_values())
    with pytest.raises(InputFileError) as excinfo:
        open_input(load_config(cfg).inputs["sst"])
    assert str(excinfo.value) == (
        f"{sst}: sea_surface_temperature values 279.1..293.4 look like kelvin but units say "
        "'degC'; fix the units attribute or set units = \"K\" in [inputs.sst]"
    )


def test_units_set_in_config_fix_the_kelvin_label(tmp_path):
    cfg = _case(tmp_path, sst='units = "K"')
    for d in ("2024-03-01",):
        _file(tmp_path, "sst", f"sst_{d.replace('-', '')}.nc", d, np.full(SHAPE, 288.15))
    assert _run(cfg).exit_code == 0


# ------------------------------------------------------------------------------------------
# all-missing files, all out of range
# ------------------------------------------------------------------------------------------


def test_all_missing_file_is_named(tmp_path, warned):
    cfg = _case(tmp_path, days=("2024-03-01", "2024-03-02"))
    empty = _file(tmp_path, "chl", "chl_20240302.nc", "2024-03-02", np.full(SHAPE, -999.0))
    assert _run(cfg).exit_code == 0
    assert warned == [f"{empty}: chl has no valid value (2024-03-02): every value is missing"]


def test_all_missing_temperature_file_is_named_once_when_opened(tmp_path, warned):
    cfg = _case(tmp_path, days=("2024-03-01", "2024-03-02"))
    empty = _file(tmp_path, "sst", "sst_20240302.nc", "2024-03-02", np.full(SHAPE, -999.0))
    with dask.config.set(scheduler="sync"):
        spec = load_config(cfg).inputs["sst"]
        open_input(spec)  # the sample (one stored chunk = the whole 8 x 8 field) sees it
        assert warned == [f"{empty}: sst has no valid value: every value is missing"]
        warned.clear()
        assert _run(cfg).exit_code == 0
    assert warned == [f"{empty}: sst has no valid value: every value is missing"]  # not twice


def test_file_entirely_out_of_range_is_named_after_the_compute(tmp_path, warned):
    cfg = _case(tmp_path, days=("2024-03-01", "2024-03-02"))
    # W m-2 values written under a daily-dose label: 200 "mol m-2 d-1" everywhere
    bad = _file(tmp_path, "par", "par_20240302.nc", "2024-03-02", np.full(SHAPE, 200.0))
    assert _run(cfg).exit_code == 0
    assert warned == [
        "par 2024-03: 64 values above 130 mol m-2 d-1 masked (50.0 %)",  # 64 of 128
        f"{bad}: every par value (2024-03-02) is outside 0..130 mol m-2 d-1 (0 below, 64 "
        "above) and masked; check the file's units or valid_range in [inputs.par]",
    ]


# ------------------------------------------------------------------------------------------
# damaged chunks, both reader paths
# ------------------------------------------------------------------------------------------


def _compressed_chl(path: Path, day: str) -> Path:
    """A deflated one-chunk chlorophyll field (netCDF4 library, zlib level 4)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(3)
    with netCDF4.Dataset(path, "w") as ds:
        ds.time_coverage_start = day
        ds.time_coverage_end = day
        ds.createDimension("lat", len(LAT))
        ds.createDimension("lon", len(LON))
        for name, vals, std, u in (("lat", LAT, "latitude", "degrees_north"),
                                   ("lon", LON, "longitude", "degrees_east")):
            v = ds.createVariable(name, "f8", (name,))
            v.standard_name, v.units = std, u
            v[:] = vals
        v = ds.createVariable("chl", "f4", ("lat", "lon"), zlib=True, complevel=4,
                              chunksizes=SHAPE)
        v.standard_name, v.units = CHL_STD, "mg m-3"
        v[:] = rng.uniform(0.1, 1.0, SHAPE)
    return path


def _flip(path: Path) -> tuple[int, bytes]:
    """Flip a byte in the middle of the stored chunk; return its offset and damaged bytes."""
    with h5py.File(path, "r") as f:
        info = f["chl"].id.get_chunk_info(0)
    offset, size = int(info.byte_offset), int(info.size)
    raw = bytearray(path.read_bytes())
    raw[offset + size // 2] ^= 0xFF
    path.write_bytes(bytes(raw))
    return offset, bytes(raw[offset:offset + size])


def test_damaged_chunk_named_by_the_chunk_reader(tmp_path):
    cfg = _case(tmp_path)
    chl = _compressed_chl(tmp_path / "chl" / "chl_20240301.nc", "2024-03-01")
    offset, damaged = _flip(chl)
    with pytest.raises(zlib.error) as ref:  # the reference inflater's own complaint
        zlib.decompress(damaged)
    res = _run(cfg)
    assert res.exit_code == 1
    assert res.stderr.strip() == (
        f"euphotic: error: {chl}: stored chunk (0, 0) at byte {offset} cannot be decoded "
        f"(error: {ref.value}): the file is damaged"
    )
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_damaged_chunk_named_by_the_netcdf_library_path(tmp_path, monkeypatch):
    monkeypatch.setenv("EUPHOTIC_READER", "netcdf4")
    cfg = _case(tmp_path)
    chl = _compressed_chl(tmp_path / "chl" / "chl_20240301.nc", "2024-03-01")
    _flip(chl)
    res = _run(cfg)
    assert res.exit_code == 1
    # netCDF-C reports a failed HDF5 filter as "NetCDF: HDF error" (its error string for
    # NC_EHDFERR), without the file.
    assert res.stderr.strip() == (
        f"euphotic: error: {chl}: reading values failed (RuntimeError: NetCDF: HDF error): "
        "the file is damaged or unreadable"
    )
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_input_errors_survive_a_trip_to_a_worker():
    err = DuplicatePeriodError("/data/a.nc", "chl period 2024-03-01 is given 2 times")
    back = pickle.loads(pickle.dumps(err))
    assert type(back) is DuplicatePeriodError and str(back) == str(err)
    assert back.path == "/data/a.nc"


# ------------------------------------------------------------------------------------------
# what the user sees on stderr (a real process)
# ------------------------------------------------------------------------------------------


@pytest.mark.slow
def test_masked_values_warning_on_stderr(tmp_path):
    cfg = _case(tmp_path)
    bad = np.full(SHAPE, 0.3)
    bad[0, 0] = 500.0
    _file(tmp_path, "chl", "chl_20240301.nc", "2024-03-01", bad)
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1] / "src"))
    proc = subprocess.run([sys.executable, "-m", "euphotic.cli", "run", str(cfg), "-q"],
                          capture_output=True, text=True, env=env, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr.splitlines() == [
        "euphotic: warning: chl 2024-03: 1 value above 100 mg m-3 masked (1.6 %)"]


# ------------------------------------------------------------------------------------------
# counting reads nothing twice and holds nothing back
# ------------------------------------------------------------------------------------------


def _held_bytes(cfg, *, counts: bool) -> int:
    """Most bytes of results the local scheduler holds at once during a run."""
    from dask.callbacks import Callback

    from euphotic.pipeline import run

    peak = [0]

    class Held(Callback):
        def _posttask(self, key, result, dsk, state, id):
            peak[0] = max(peak[0], sum(getattr(x, "nbytes", 0) for x in state["cache"].values()))

    with pytest.MonkeyPatch.context() as mp, Held():
        if not counts:
            mp.setattr(screen.Report, "lazy", lambda self, months: [[] for _ in self.inputs])
            mp.setattr(screen.Report, "finish", lambda self, months, computed: {
                np.datetime64(m, "M"): {} for m in months})
        run(cfg, progress=False)
    return peak[0]


@pytest.mark.slow
def test_counting_holds_no_block_back(tmp_path):
    """The counts are small targets of the one compute; they must not make the scheduler read
    a month's blocks ahead of the model and keep them. Measured on the bundled demo (30 daily
    files per input): one target gathering a month's counts held 36 MB instead of 4 MB."""
    import shutil

    root = Path(__file__).resolve().parents[1]
    shutil.copytree(root / "configs", tmp_path / "configs")
    (tmp_path / "sample_grids").symlink_to(root / "sample_grids")
    cfg = load_config(tmp_path / "configs" / "demo.toml")
    cfg.figures = False
    cfg.models = ["vgpm"]
    without = _held_bytes(cfg, counts=False)
    with_counts = _held_bytes(cfg, counts=True)
    assert with_counts <= 1.5 * without + 1e6, (with_counts, without)


def test_counting_reads_each_block_once(tmp_path):
    days = [f"2024-03-{d:02d}" for d in range(1, 4)]
    cfg = _case(tmp_path, days=days)
    from euphotic import readers

    reads: list[str] = []
    real = readers._NamedReads.__getitem__  # write_field files are contiguous: library path

    def counted(self, key):
        reads.append(self.path)
        return real(self, key)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(readers._NamedReads, "__getitem__", counted)
        from euphotic.pipeline import run

        run(load_config(cfg), progress=False)
    # one read per file (each is one block), screening included
    inputs = [str(p) for r in ("chl", "par", "sst") for p in (tmp_path / r).glob("*.nc")]
    assert sorted(reads) == sorted(inputs)


def test_marked_values_are_counted_block_by_block_as_numpy_counts():
    """Values the read path marked (below / above the range: NaN with payloads 1 / 2) are
    counted per period block by block (7 x 9 blocks, uneven edges) as numpy counts the
    unmarked array (numpy is the reference); plain NaN (missing) is in no count, and the
    marks are NaN to numpy."""
    import dask.array as dsa
    import xarray as xr

    x = np.random.default_rng(0).uniform(-10, 200, (3, 23, 31)).astype("f4")
    x[0, 0, :5] = np.nan
    below, above = screen.marks(np.float32)
    assert np.isnan(below) and np.isnan(above)
    marked = np.where(x < 0.001, below, np.where(x > 100, above, x)).astype("f4")
    da = xr.DataArray(dsa.from_array(marked, chunks=(1, 7, 9)), dims=("time", "lat", "lon"),
                      attrs={"units": "mg m-3"})
    counts = screen.count_marks(da, role="chl", lo=0.001, hi=100.0)
    want = [[(x[i] < 0.001).sum(), (x[i] > 100).sum(), ((x[i] >= 0.001) & (x[i] <= 100)).sum()]
            for i in range(3)]
    np.testing.assert_array_equal(counts.totals.compute(), want)
    np.testing.assert_array_equal(np.isnan(marked), np.isnan(x) | (x < 0.001) | (x > 100))