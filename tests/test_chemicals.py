"""Chemical property table: provenance on every value, look-up by name and alias."""
import csv
import math
from importlib import resources

import pytest

from transport.model import chemicals

PROVENANCE_WORDS = ("from memory", "common practice")


def _rows():
    text = resources.files("transport").joinpath("data/chemicals.csv").read_text(encoding="utf-8")
    return list(csv.DictReader(text.splitlines()))


def test_table_has_required_columns_and_rows():
    rows = _rows()
    assert len(rows) >= 12
    assert tuple(rows[0].keys()) == chemicals.COLUMNS


@pytest.mark.parametrize("value_col, source_col", [
    ("free_water_diffusivity_m2_s", "diffusivity_source"),
    ("koc_L_kg", "koc_source"),
    ("half_life_low_d", "half_life_source"),
    ("half_life_high_d", "half_life_source"),
])
def test_every_value_has_a_source(value_col, source_col):
    """Every value carries a source: a named publication (with a year), or the words
    'from memory' or 'common practice' (project rule for data provenance)."""
    for row in _rows():
        assert row[value_col].strip(), row["name"]
        source = row[source_col].strip()
        assert source, f"{row['name']}: {source_col} empty"
        has_year = any(tok.strip(",.();").isdigit() and len(tok.strip(",.();")) == 4
                       for tok in source.split())
        assert has_year or any(w in source for w in PROVENANCE_WORDS), (row["name"], source)


def test_required_contaminants_present():
    for name in ("TCE", "PCE", "vinyl chloride", "1,1,1-TCA", "benzene", "toluene",
                 "ethylbenzene", "o-xylene", "naphthalene", "atrazine", "nitrate", "chloride",
                 "cadmium", "lead"):
        chemicals.lookup(name)


def test_published_values_carried_exactly():
    """Values with a named source, as published: chloride D_w 2.03e-9 m2/s (Li & Gregory
    1974, GCA 38:703); benzene Koc 61.7 L/kg and PCE 265 L/kg (US EPA 1996, Table K-1);
    nitrate 1.92e-9 m2/s (Boudreau 1997)."""
    assert chemicals.lookup("chloride").free_water_diffusivity == 2.03e-9
    assert chemicals.lookup("benzene").organic_carbon_partition == pytest.approx(61.7e-3)
    assert chemicals.lookup("PCE").organic_carbon_partition == pytest.approx(265e-3)
    assert chemicals.lookup("nitrate").free_water_diffusivity == 1.92e-9


def test_half_life_ranges_ordered_and_in_seconds():
    for chem in chemicals.load_table():
        assert 0 < chem.half_life_low <= chem.half_life_high
    tce = chemicals.lookup("tce")
    assert tce.half_life_low == 321 * 86400.0


def test_metals_have_no_koc_and_ions_do_not_decay():
    """Metal sorption is not organic-carbon controlled (common practice): Koc n/a."""
    assert chemicals.lookup("cadmium").organic_carbon_partition is None
    assert math.isinf(chemicals.lookup("chloride").half_life_low)


@pytest.mark.parametrize("query", ["TCE", "tce", "Trichloroethylene", " trichloro-ethene ",
                                   "TRICHLOROETHENE"])
def test_lookup_case_and_alias_insensitive(query):
    assert chemicals.lookup(query).name == "trichloroethene"


def test_unknown_name_suggests_close_match():
    with pytest.raises(chemicals.ChemicalError) as info:
        chemicals.lookup("benzen")
    assert "Did you mean 'benzene'" in str(info.value)
    assert isinstance(info.value, ValueError)


def test_malformed_table_rejected():
    header = ",".join(chemicals.COLUMNS)
    with pytest.raises(chemicals.ChemicalError, match="empty"):
        chemicals.parse_table(header + "\nx,,1e-9,,10,src,1,2,src,C2\n")
    with pytest.raises(chemicals.ChemicalError, match="not a number"):
        chemicals.parse_table(header + "\nx,,abc,src,10,src,1,2,src,C2\n")


def test_molar_masses_from_iupac_atomic_weights():
    # IUPAC 2021 conventional atomic weights (from memory): C 12.011, H 1.008, Cl 35.45,
    # N 14.007, O 15.999; the sums by hand
    assert chemicals.lookup("PCE").molar_mass == pytest.approx(0.165822, rel=1e-12)
    assert chemicals.lookup("TCE").molar_mass == pytest.approx(0.131380, rel=1e-12)
    assert chemicals.lookup("cis-DCE").molar_mass == pytest.approx(0.096938, rel=1e-12)
    assert chemicals.lookup("vinyl chloride").molar_mass == pytest.approx(0.062496, rel=1e-12)
    assert chemicals.lookup("nitrate").molar_mass == pytest.approx(0.062004, rel=1e-12)
    with pytest.raises(chemicals.ChemicalError, match="atomic weight"):
        chemicals.molar_mass("C2Xe")
    with pytest.raises(chemicals.ChemicalError, match="plain molecular formula"):
        chemicals.molar_mass("C2(OH)")


def test_cis_dce_diffusivity_follows_hayduk_laudie_like_its_neighbours():
    """D_w = 13.26e-5 / (mu^1.14 V^0.589) cm2/s, mu = 0.89 cP, V the LeBas molar volume
    (C 14.8, H 3.7, Cl 24.6 cm3/mol; Hayduk & Laudie 1974, AIChE J. 20:611; LeBas
    increments from memory): the TCE row reproduces it, so the cis-DCE row follows it."""
    def hl(v):
        return 13.26e-5 / (0.89 ** 1.14 * v ** 0.589) * 1e-4
    assert chemicals.lookup("TCE").free_water_diffusivity == pytest.approx(
        hl(2 * 14.8 + 3.7 + 3 * 24.6), rel=1e-3)
    assert chemicals.lookup("cis-DCE").free_water_diffusivity == pytest.approx(
        hl(2 * 14.8 + 2 * 3.7 + 2 * 24.6), rel=1e-3)
