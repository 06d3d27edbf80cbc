"""Parameter files: names, ranges, combinations, overrides and defaults (issue 2).

References: the published Planck 2018 values (paper VI, A&A 641, A6, Table 2, last column,
TT,TE,EE+lowE+lensing+BAO) as carried by astropy.cosmology.Planck18; otherwise the rules
the parameter files promise (DEVELOPERS.md, icgen.parameters docstring): unknown names are
refused with the nearest valid name, every value is range-checked, and the message names
the key and the range.
"""

import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from icgen import parameters
from icgen.cosmology import PLANCK18, RANGES
from icgen.errors import ParameterError


def _err(text, overrides=()):
    """The ParameterError message for ``text`` (fails if there is none)."""
    with pytest.raises(ParameterError) as info:
        parameters.loads(text, overrides)
    return str(info.value)


# ---- unknown names ------------------------------------------------------------------------------

def test_unknown_key_is_named_with_a_suggestion():
    msg = _err("[cosmology]\nsigma8 = 0.8\n")
    assert "unknown key 'sigma8'" in msg and "[cosmology]" in msg
    assert "did you mean 'sigma_8'?" in msg


def test_unknown_key_without_a_close_name_lists_the_valid_ones():
    msg = _err("[cosmology]\nfoo = 1\n")
    assert "'foo'" in msg and "omega_m" in msg and "sigma_8" in msg


def test_unknown_section_is_named_with_a_suggestion():
    msg = _err("[cosmo]\nh = 0.7\n")
    assert "unknown section [cosmo]" in msg and "did you mean 'cosmology'?" in msg


def test_misspelt_choice_is_refused_with_a_suggestion():
    msg = _err('[spectrum]\nsource = "eisenstein"\n')
    assert "[spectrum] source" in msg and "did you mean 'eisenstein_hu'?" in msg


# ---- values and combinations --------------------------------------------------------------------

def test_negative_h_names_key_value_and_range():
    msg = _err("[cosmology]\nh = -0.7\n")
    lo, hi = RANGES["h"]
    assert "[cosmology] h" in msg and "-0.7" in msg and f"[{lo:g}, {hi:g}]" in msg


def test_wrong_type_is_refused():
    assert "expected a number" in _err('[cosmology]\nh = "0.7"\n')
    assert "expected a number" in _err("[cosmology]\nh = true\n")  # a bool is not a number
    assert "expected an integer" in _err("[start]\nlpt_order = 1.5\n")


def test_omega_b_above_omega_m_is_refused():
    msg = _err("[cosmology]\nomega_m = 0.3\nomega_b = 0.5\n")
    assert "omega_b = 0.5" in msg and "omega_m = 0.3" in msg and "omega_b <= omega_m" in msg


def test_sigma_8_and_a_s_together_are_refused():
    msg = _err("[cosmology]\nsigma_8 = 0.8\na_s = 2.1e-9\n")
    assert "sigma_8" in msg and "a_s" in msg and "remove the other" in msg


def test_a_s_alone_replaces_the_default_sigma_8():
    c = parameters.loads("[cosmology]\na_s = 2.1e-9\n").cosmology
    assert c.a_s == 2.1e-9 and c.sigma_8 is None


def test_invalid_toml_names_the_source():
    assert "<string> is not valid TOML" in _err("[cosmology]\nh = 0.7\nh = 0.8\n")


def test_missing_required_key_message():
    params = parameters.loads("[cosmology]\nh = 0.7\n")
    with pytest.raises(ParameterError) as info:
        params.get("box", "size")
    msg = str(info.value)
    assert "[box] size is required" in msg and "Mpc/h" in msg and "does not set it" in msg


# ---- overrides ----------------------------------------------------------------------------------

@pytest.mark.parametrize("text, expected", [
    ("cosmology.sigma_8=0.8", ("cosmology", "sigma_8", 0.8)),        # TOML float
    ("phases.seed = 42", ("phases", "seed", 42)),                    # TOML int, spaces allowed
    ("phases.paired=true", ("phases", "paired", True)),              # TOML bool
    ('spectrum.source="power_law"', ("spectrum", "source", "power_law")),  # TOML string
    ("spectrum.source=power_law", ("spectrum", "source", "power_law")),    # bare string
    ("spectrum.columns=[0, 2]", ("spectrum", "columns", [0, 2])),    # TOML array
    ("spectrum.table=my table.txt", ("spectrum", "table", "my table.txt")),  # bare, with a space
])
def test_override_parsing(text, expected):
    assert parameters.parse_override(text) == expected


@pytest.mark.parametrize("bad", ["sigma_8=0.8", "cosmology.sigma_8", "=0.8"])
def test_malformed_override_is_refused(bad):
    with pytest.raises(ParameterError, match="expected section.key=value"):
        parameters.parse_override(bad)


def test_overrides_win_over_the_file_and_are_validated():
    p = parameters.loads("[cosmology]\nh = 0.7\n", ["cosmology.h=0.65", "spectrum.source=power_law"])
    assert p.cosmology.h == 0.65 and p.get("spectrum", "source") == "power_law"
    assert "did you mean 'cosmology'?" in _err("", ["cosmo.h=0.7"])
    assert "did you mean 'omega_m'?" in _err("", ["cosmology.omega_mm=0.3"])
    assert "outside the allowed range" in _err("", ["cosmology.h=-1"])


# ---- defaults: Planck 2018 ----------------------------------------------------------------------

def test_defaults_are_planck_2018():
    import astropy.cosmology as ac
    import astropy.units as u

    c = parameters.loads("").cosmology
    assert c == PLANCK18
    ref = ac.Planck18  # Planck 2018 VI Table 2 (TT,TE,EE+lowE+lensing+BAO), per its meta
    assert "Table 2" in ref.meta["reference"] and "BAO" in ref.meta["reference"]
    assert c.h == pytest.approx(ref.H0.to_value(u.km / u.s / u.Mpc) / 100.0, rel=1e-12)
    # Omega_b h^2 = 0.02242; astropy stores Ob0 = 0.04897 (4 digits): rounding 1e-4
    assert c.omega_b == pytest.approx(ref.Ob0, rel=1e-4)
    # Omega_m = 0.3111 includes the 0.06 eV neutrino, which astropy keeps apart from Om0
    # (omega_nu h^2 = m_nu / 93.14 eV); 4-digit rounding of both numbers: 2e-4
    om_total = ref.Om0 + 0.06 / 93.14 / ref.h**2
    assert c.omega_m == pytest.approx(om_total, rel=2e-4)
    assert c.n_s == ref.meta["n"] and c.sigma_8 == ref.meta["sigma8"]
    assert c.t_cmb == ref.Tcmb0.to_value(u.K) and c.n_eff == ref.Neff
    assert c.omega_k == 0.0 and c.w0 == -1.0 and c.wa == 0.0


def test_load_from_file_and_relative_paths(tmp_path):
    f = tmp_path / "run.toml"
    f.write_text('[cosmology]\nh = 0.7\n[spectrum]\nsource = "table"\ntable = "pk.txt"\n')
    p = parameters.load(f, ["cosmology.omega_m=0.3"])
    assert p.cosmology.h == 0.7 and p.cosmology.omega_m == 0.3
    assert p.path("spectrum", "table") == tmp_path / "pk.txt"  # relative to the file
    assert str(f) in _err_load(tmp_path / "run.toml", ["cosmology.h=7"])


def _err_load(path, overrides=()):
    with pytest.raises(ParameterError) as info:
        parameters.load(path, overrides)
    return str(info.value)


def test_unreadable_and_non_utf8_files(tmp_path):
    assert "cannot read parameter file" in _err_load(tmp_path / "missing.toml")
    bad = tmp_path / "latin1.toml"
    bad.write_bytes(b"# caf\xe9\n[cosmology]\nh = 0.7\n")
    assert "is not UTF-8" in _err_load(bad)


def test_to_toml_reproduces_the_run():
    p = parameters.loads("[cosmology]\nh = 0.7\nomega_k = 0.01\n[box]\nsize = 50.0\n"
                         "particles_per_side = 32\n")
    again = parameters.loads(p.to_toml())
    assert again.cosmology == p.cosmology
    assert again.get("box", "size") == 50.0 and again.get("box", "particles_per_side") == 32


# ---- property test: any input gives a valid Parameters or a ParameterError, nothing else -------

_COSMO_KEYS = ["h", "omega_m", "omega_b", "omega_k", "w0", "wa", "t_cmb", "n_eff", "n_s",
               "sigma_8", "a_s", "alpha_s"]


def _toml_number(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    return repr(v)


def _in_range(key):
    lo, hi = RANGES[key]
    return st.floats(lo, hi, allow_nan=False)


#: Everyday values (a valid model whatever the other keys are, except a_s with sigma_8).
_TYPICAL = {"h": (0.5, 0.9), "omega_m": (0.2, 0.5), "omega_b": (0.0, 0.1), "omega_k": (-0.1, 0.1),
            "w0": (-1.5, -0.5), "wa": (-0.5, 0.3), "t_cmb": (0.0, 3.0), "n_eff": (0.0, 4.0),
            "n_s": (0.9, 1.0), "sigma_8": (0.6, 1.0), "a_s": (1e-9, 3e-9), "alpha_s": (-0.05, 0.05)}

_values = {
    key: st.one_of(
        st.floats(*_TYPICAL[key]),                                 # valid
        _in_range(key),                                            # within its own range
        st.one_of(
            st.floats(allow_nan=True, allow_infinity=True),        # anything, NaN and inf included
            st.integers(-10, 10),
            st.booleans(),
            st.text(alphabet="abc019.", max_size=4),
        ),
    )
    for key in _COSMO_KEYS
}


def _omega_r(t_cmb, n_eff, h):
    """Photons (Stefan-Boltzmann, rho c^2 = 4 sigma T^4 / c) plus n_eff massless neutrinos at
    7/8 (4/11)^(4/3) each, over the critical density 3 H0^2/(8 pi G) (textbook; scipy.constants)."""
    from scipy import constants as k

    h0 = 100.0 * h * 1e3 / (648000.0 / math.pi * 149597870700.0 * 1e6)  # 1/s
    omega_gamma = 4.0 * k.Stefan_Boltzmann * t_cmb**4 / k.c**3 / (3.0 * h0**2 / (8.0 * math.pi * k.G))
    return omega_gamma * (1.0 + n_eff * 7.0 / 8.0 * (4.0 / 11.0) ** (4.0 / 3.0))


def _predicted_valid(given):
    """Whether the rules of the parameter files accept ``given`` (written from the rules);
    None when omega_de is within 1e-9 of its -20 limit (too close to call in floating point)."""
    for key, v in given.items():
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            return False
        lo, hi = RANGES[key]
        if not (math.isfinite(v) and lo <= v <= hi):
            return False
    c = {k: getattr(PLANCK18, k) for k in _COSMO_KEYS}
    c.update(given)
    if "a_s" in given and "sigma_8" not in given:
        c["sigma_8"] = None
    if c["omega_b"] > c["omega_m"]:
        return False
    if c["sigma_8"] is not None and c["a_s"] is not None:
        return False
    # omega_de = 1 - omega_m - omega_r - omega_k must stay >= -20 (cosmology.py)
    omega_de = 1.0 - c["omega_m"] - _omega_r(c["t_cmb"], c["n_eff"], c["h"]) - c["omega_k"]
    if abs(omega_de + 20.0) < 1e-9:
        return None
    return omega_de >= -20.0


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(_COSMO_KEYS), st.none(), max_size=6).flatmap(
    lambda d: st.fixed_dictionaries({k: _values[k] for k in d})))
def test_random_cosmology_sections_give_parameters_or_parameter_error(given_values):
    text = "[cosmology]\n" + "".join(f"{k} = {_toml_number(v)}\n" for k, v in given_values.items())
    try:
        p = parameters.loads(text)
    except ParameterError as exc:
        msg = str(exc)
        # the message names one of the keys given (or omega_de, the derived closing density)
        assert any(k in msg for k in list(given_values) + ["omega_de"]), msg
        assert _predicted_valid(given_values) in (False, None), msg
        return
    # accepted: every value within its published range and the combination rules hold
    assert _predicted_valid(given_values) in (True, None)
    c = p.cosmology
    for key, v in given_values.items():
        assert getattr(c, key) == float(v)
    assert 0.0 <= c.omega_b <= c.omega_m
    assert c.sigma_8 is None or c.a_s is None
    assert parameters.loads(p.to_toml()).cosmology == c  # and it reproduces itself


@settings(max_examples=100, deadline=None)
@given(st.text(alphabet="abcdefghijklmnopqrstuvwxyz_0123456789", min_size=1, max_size=12))
def test_random_key_names_are_known_or_named_in_the_error(key):
    try:
        parameters.loads(f"[cosmology]\n{key} = 0.5\n")
    except ParameterError as exc:
        if key not in _COSMO_KEYS:
            assert f"unknown key '{key}'" in str(exc)
        return
    assert key in _COSMO_KEYS
