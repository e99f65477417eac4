"""`euphotic methods`: the methods paragraph and reference list of a committed run.

Checks: the paragraph names what the run did (models with citations, inputs and periods, unit
conversions, screening counts, earth model, caution) and nothing it did not do; the reference
list holds exactly the cited works, as text and as BibTeX that pybtex (the reference BibTeX
library) parses back; the command's exit code, files and manifest entries.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from pybtex.database import parse_file, parse_string

from euphotic import methods
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.errors import NoRunError
from euphotic.methods import MethodsError, methods_text
from euphotic.outputs import CAUTION
from euphotic.pipeline import run

from ._grids import grid, monthly_case, write_field

BIB = Path(methods.__file__).with_name("references.bib")
#: The four files of the "methods" kind.
FILES = ["methods.md", "methods.txt", "references.bib", "references.txt"]
PAR_ENERGY_STD = "surface_downwelling_photosynthetic_radiative_flux_in_air"


def _small_run(tmp: Path, *, par_w_m2: bool, bad_chl: int = 0) -> Path:
    """Two monthly composites (2023-01, 2023-02) on a 0.5-degree 10 x 10 degree box, sphere
    earth, ocean from valid temperature. ``par_w_m2``: PAR files in W m-2 (energy flux);
    ``bad_chl``: that many chlorophyll values per month set to 500 mg m-3 (above the 100
    mg m-3 valid range), masked by the screening."""
    cfg = monthly_case(tmp, 2, res=0.5, seed=3)
    lat, lon = grid(40.0, 50.0, -30.0, -20.0, 0.5)
    shape = (len(lat), len(lon))
    rng = np.random.default_rng(5)
    for m in range(2):
        a = np.datetime64("2023-01") + m
        bounds = (str(a.astype("datetime64[D]")), str((a + 1).astype("datetime64[D]")))
        if par_w_m2:
            write_field(tmp / "par" / f"p{m:02d}.nc", "par", PAR_ENERGY_STD, "W m-2",
                        rng.uniform(20, 100, shape), lat, lon, time_bounds=bounds)
        if bad_chl:
            chl = rng.uniform(0.1, 3.0, shape)
            chl.flat[:bad_chl] = 500.0
            write_field(tmp / "chl" / f"c{m:02d}.nc", "chl",
                        "mass_concentration_of_chlorophyll_a_in_sea_water", "mg m-3", chl,
                        lat, lon, time_bounds=bounds)
    run(load_config(cfg), progress=False)
    return tmp / "out"


@pytest.fixture(scope="module")
def energy_run(tmp_path_factory):
    return _small_run(tmp_path_factory.mktemp("energy"), par_w_m2=True, bad_chl=3)


def _bib_keys(text: str) -> set[str]:
    return set(parse_string(text, "bibtex").entries.keys())


# ---- the demo run ---------------------------------------------------------------------------


def test_demo_paragraph_names_models_inputs_earth_and_caution(demo_run):
    m = methods_text(demo_run)
    flat = " ".join(m.text.split())
    assert flat == " ".join(m.markdown.split("## References")[0]
                            .removeprefix("## Methods").split())
    # models with the equations and citations (README "The science"; models/vgpm.py)
    assert ("the Vertically Generalized Production Model (VGPM) of Behrenfeld and Falkowski "
            "(1997), eq. 10,") in flat
    assert "seventh-order polynomial of their eq. 11" in flat
    assert "euphotic depth Z_eu from surface chlorophyll after Morel and Berthon (1989)" in flat
    assert "exponential temperature function of Eppley (1972)" in flat
    assert ("Model parameters as run: VGPM, euphotic_depth = morel_berthon_1989 (Morel and "
            "Berthon, 1989) (default);") in flat
    assert "estimated for 2025-04 with euphotic" in flat
    # inputs: 30 daily files each over April 2025 (the bundled sample grids)
    for words in ("surface chlorophyll-a concentration", "sea surface temperature",
                  "daily photosynthetically available radiation (PAR)"):
        assert f"{words} (30 files; 30 daily periods, 2025-04-01 to 2025-04-30;" in flat
    # the demo PAR is a photon flux (umol m-2 s-1): no energy conversion, no McCree
    assert "PAR was converted from umol m-2 s-1 to mol m-2 d-1" in flat
    assert "McCree" not in flat and "mccree1972" not in m.keys
    # SST on its coarser 1/4-degree grid was interpolated onto the 1/12-degree chlorophyll grid
    assert "sea surface temperature: lat interpolated linearly (0.25 -> 0.0833333 deg)" in flat
    assert "CBM model of Forsythe et al. (1995)" in flat
    # two models: their ensemble (euphotic.ensemble_outputs) and its rule
    assert ("The spread across the 4 models is given per cell and month, and per region and "
            "month of the totals, as their mean, minimum, maximum, standard deviation (divisor "
            "N - 1) and coefficient of variation, only where every model has a value") in flat
    assert ("on the WGS84 ellipsoid (semi-major axis 6378137.0 m, inverse flattening "
            "298.257223563) (Snyder, 1987).") in flat
    assert "Skerrow Shelf: box [-22.0, 44.0, -15.0, 56.0]" in flat
    assert "Ocean cells: from the land mask ../sample_grids/masks.nc variable 'land'." in flat
    assert flat.endswith("Caution: " + CAUTION)
    assert m.keys == ("behrenfeld1997", "morel1989", "eppley1972", "platt1988", "platt1990",
                      "platt1980", "behrenfeld2005", "forsythe1995", "snyder1987")


def test_demo_references_are_exactly_the_cited_works(demo_run):
    m = methods_text(demo_run)
    bib = parse_file(BIB)
    # BibTeX: parses back with pybtex, the same keys, and the entries' fields as in
    # references.bib (one source of truth)
    back = parse_string(m.references_bibtex, "bibtex")
    assert set(back.entries) == set(m.keys)
    for k in m.keys:
        assert dict(back.entries[k].fields) == dict(bib.entries[k].fields)
        assert [str(p) for p in back.entries[k].persons["author"]] == \
            [str(p) for p in bib.entries[k].persons["author"]]
    # text list: one line per cited work, alphabetical; each cited author-year is in the text
    lines = m.references_text.splitlines()
    assert len(lines) == len(m.keys) == 9
    assert lines == sorted(lines, key=str.lower)
    assert lines[0] == ("Behrenfeld, M. J. and Falkowski, P. G. (1997). Photosynthetic rates "
                        "derived from satellite-based chlorophyll concentration. Limnology and "
                        "Oceanography 42(1), 1-20.")
    assert lines[4].startswith("Morel, A. and Berthon, J.-F. (1989). Surface pigments")
    assert lines[8] == ("Snyder, J. P. (1987). Map Projections: A Working Manual. U.S. Geological "
                        "Survey Professional Paper 1395.")
    flat = " ".join(m.text.split())
    for k in m.keys:  # cited in the paragraph, as "Eppley (1972)" or "(Snyder, 1987)"
        who = methods.author_year(bib.entries[k])
        assert who in flat or "(" + who.replace(" (", ", ") in flat
    # every reference listed is cited, and every entry not cited is absent
    assert "mccree1972" not in back.entries and "McCree" not in m.references_text


# ---- a run of its own: PAR in W m-2, screening that masks values -----------------------------


def test_energy_par_cites_mccree_and_screening_counts(energy_run):
    m = methods_text(energy_run)
    flat = " ".join(m.text.split())
    # W m-2 -> mol photons m-2 d-1 with 4.57 umol J-1 (McCree 1972) and 86,400 s d-1
    assert ("PAR given as an energy flux (W m-2) was converted to a photon dose in mol m-2 d-1 "
            "with 4.57 umol J-1 for daylight PAR (McCree, 1972) and 86,400 s d-1") in flat
    assert "mccree1972" in m.keys
    assert "McCree, K. J. (1972). Test of current definitions" in m.references_text
    assert "mccree1972" in _bib_keys(m.references_bibtex)
    # two monthly composites per input, one model
    assert "estimated for the 2 months 2023-01 to 2023-02" in flat
    assert "using the model: the Vertically Generalized Production Model" in flat
    assert "Eppley" not in flat and "eppley1972" not in m.keys
    assert ("surface chlorophyll-a concentration (2 files; 2 periods of 28 to 31 days, "
            "2023-01-01 to 2023-02-28; in mg m-3)") in flat
    # screening: 3 values of 500 mg m-3 per month above the 0.001..100 mg m-3 range, 400
    # cells a month (20 x 20 at 0.5 degree): counted by hand
    assert ("chlorophyll 0.001 to 100 mg m-3 (6 of 800 values masked: 0 below, 6 above)"
            in flat)
    # the default earth model and ocean from valid temperature
    assert "on the sphere of the WGS84 authalic radius (6371007.2 m) (Snyder, 1987)." in flat
    assert "Ocean cells: cells with a valid sea surface temperature." in flat
    assert "Regions: Box: box [-30.0, 40.0, -20.0, 50.0]" in flat
    assert "regridd" not in flat and "brought onto it" not in flat  # one grid: nothing regridded
    assert flat.endswith("Caution: " + CAUTION)
    assert set(m.keys) == _bib_keys(m.references_bibtex)
    assert len(m.references_text.splitlines()) == len(m.keys)


def test_photon_par_has_no_mccree(tmp_path):
    m = methods_text(_small_run(tmp_path, par_w_m2=False))
    flat = " ".join(m.text.split())
    # monthly_case writes PAR as a photon dose (einstein m-2 day-1): no McCree factor
    assert "McCree" not in flat and "mccree1972" not in m.keys
    assert "mccree1972" not in _bib_keys(m.references_bibtex)
    assert "PAR was converted" not in flat  # einstein m-2 day-1 is mol m-2 d-1 already
    assert "chlorophyll 0.001 to 100 mg m-3 (0 of 800 values masked: 0 below, 0 above)" in flat


# ---- the command ------------------------------------------------------------------------


def test_command_writes_four_files_as_one_unit(energy_run, tmp_path):
    folder = tmp_path / "run"
    shutil.copytree(energy_run, folder)
    before = json.loads((folder / "euphotic_manifest.json").read_text())["outputs"]
    res = CliRunner().invoke(main, ["methods", str(folder)])
    assert res.exit_code == 0, res.output
    text = (folder / "methods.txt").read_text()
    assert res.output.startswith(text)
    assert res.output[len(text):] == "\n" + "".join(f"wrote {folder / n}\n" for n in
                                                    ["methods.md", "methods.txt",
                                                     "references.txt", "references.bib"])
    man = json.loads((folder / "euphotic_manifest.json").read_text())["outputs"]
    assert {n: e for n, e in man.items() if n in before} == before  # the run's outputs kept
    added = {n: e for n, e in man.items() if n not in before}
    assert sorted(added) == FILES
    for n, e in added.items():
        assert e["kind"] == "methods"
        assert e["bytes"] == (folder / n).stat().st_size
    assert _bib_keys((folder / "references.bib").read_text()) == set(
        methods_text(folder).keys)
    md = (folder / "methods.md").read_text()
    assert md.startswith("## Methods\n\n") and "\n## References\n\n- Behrenfeld, M. J." in md
    # again: the new set replaces the old one (same four entries, no staging left behind)
    res = CliRunner().invoke(main, ["methods", str(folder), "-q"])
    assert res.exit_code == 0 and res.output == text
    man2 = json.loads((folder / "euphotic_manifest.json").read_text())["outputs"]
    assert sorted(n for n, e in man2.items() if e["kind"] == "methods") == FILES
    assert sorted(p.name for p in folder.iterdir()) == sorted(
        [*before, *FILES, "euphotic_manifest.json", ".euphotic.lock"])


def test_no_run_gives_one_line_and_writes_nothing(tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(NoRunError):
        methods_text(empty)
    res = CliRunner().invoke(main, ["methods", str(empty)])
    assert res.exit_code == 1
    assert res.output == (f"euphotic: error: no euphotic run in {empty}: it has no "
                          "euphotic_manifest.json\n")
    assert list(empty.iterdir()) == []
    res = CliRunner().invoke(main, ["methods", str(tmp_path / "missing")])
    assert res.exit_code == 1
    assert res.output == (f"euphotic: error: no euphotic run in {tmp_path / 'missing'}: "
                          "no such folder\n")
    assert not (tmp_path / "missing").exists()


def test_missing_bib_entry_fails_before_writing(energy_run, tmp_path, monkeypatch):
    folder = tmp_path / "run"
    shutil.copytree(energy_run, folder)
    listing = sorted(p.name for p in folder.iterdir())
    manifest = (folder / "euphotic_manifest.json").read_bytes()
    real = methods._bibliography

    def without_snyder():
        bib = real()
        del bib.entries["snyder1987"]
        return bib

    monkeypatch.setattr(methods, "_bibliography", without_snyder)
    with pytest.raises(MethodsError):
        methods_text(folder)
    res = CliRunner().invoke(main, ["methods", str(folder)])
    assert res.exit_code == 1
    assert res.output == ("euphotic: error: references.bib: no entry 'snyder1987' (cited by "
                          "the methods text)\n")
    assert sorted(p.name for p in folder.iterdir()) == listing
    assert (folder / "euphotic_manifest.json").read_bytes() == manifest


def test_reused_maps_do_not_hide_the_later_runs_inputs(tmp_path):
    """A second run that reuses two months' maps unchanged and adds a third: the inputs are
    described as the second run read them (from the map it wrote), not as the first did."""
    cfg = monthly_case(tmp_path, 3, res=0.5, seed=3)
    held = tmp_path / "held"
    held.mkdir()
    for role, stem in (("chl", "c"), ("par", "p"), ("sst", "s")):
        shutil.move(tmp_path / role / f"{stem}02.nc", held / f"{stem}02.nc")
    run(load_config(cfg), progress=False)
    first = " ".join(methods_text(tmp_path / "out").text.split())
    assert ("surface chlorophyll-a concentration (2 files; 2 periods of 28 to 31 days, "
            "2023-01-01 to 2023-02-28; in mg m-3)") in first
    for role, stem in (("chl", "c"), ("par", "p"), ("sst", "s")):
        shutil.move(held / f"{stem}02.nc", tmp_path / role / f"{stem}02.nc")
    result = run(load_config(cfg), progress=False)
    assert sorted(result.reused) == [("vgpm", "2023-01"), ("vgpm", "2023-02")]
    flat = " ".join(methods_text(tmp_path / "out").text.split())
    assert ("surface chlorophyll-a concentration (3 files; 3 periods of 28 to 31 days, "
            "2023-01-01 to 2023-03-31; in mg m-3)") in flat
    assert "estimated for the 3 months 2023-01 to 2023-03" in flat
    # screening counts summed over the three months' files, 400 cells each (hand count)
    assert "chlorophyll 0.001 to 100 mg m-3 (0 of 1,200 values masked: 0 below, 0 above)" in flat


def test_the_chosen_euphotic_depth_relation_is_named_and_cited(tmp_path):
    # A run choosing Morel & Maritorena (2001) for the VGPM's euphotic depth: the methods
    # paragraph names and cites that relation (and not Morel & Berthon 1989, which this run did
    # not use), and states the parameters the maps record.
    cfg = monthly_case(tmp_path, 1, res=1.0)
    cfg.write_text(cfg.read_text() + '\n[models.vgpm]\neuphotic_depth = "morel_maritorena_2001"\n')
    run(load_config(cfg))
    m = methods_text(tmp_path / "out")
    flat = " ".join(m.text.split())
    assert ("euphotic depth Z_eu from surface chlorophyll after Morel and Maritorena (2001)"
            in flat)
    assert ("Model parameters as run: VGPM, euphotic_depth = morel_maritorena_2001 "
            "(Morel and Maritorena, 2001).") in flat
    assert "morel2001" in m.keys and "morel1989" not in m.keys
    assert "Berthon" not in flat
