"""Model output is not observations: a file with an ensemble dimension or model-output
conventions is claimed by no reader, and naming a kind for it gets one line saying why.

Each synthetic file is an SST grid that reads as observations without the sign (the control
read below), so every refusal is the sign's doing.  Conventions cited beside each case."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from onboarding_files import sst_grid_with
from sample_files import read_checked, sst_grid_file, var

from obsprep.demo.ensemble import write_ensemble
from obsprep.demo.scenario import _Scenario
from obsprep.exceptions import NoReaderError, NotObservationsError
from obsprep.readers import guess_kind, read
from obsprep.readers.model_output import model_output_signs

KELVIN = np.full(6, 290.0)


def test_control_the_plain_grid_is_observations(tmp_path):
    path = sst_grid_file(tmp_path / "plain.nc", KELVIN)
    assert guess_kind(path) == "sst_grid"
    assert len(read_checked(path)) == 6
    path = sst_grid_with(tmp_path / "plain2.nc", Conventions="CF-1.8")
    assert guess_kind(path) == "sst_grid" and len(read_checked(path)) == 6


CASES = {
    # a dimension of ensemble members (common practice: the names modelling centres use)
    "member_dimension": (dict(dims={"member": 4}), "dimension 'member'"),
    "ensemble_dimension": (dict(dims={"ensemble_member": 3}), "dimension 'ensemble_member'"),
    "realization_dimension": (dict(dims={"Realization": 2}), "dimension 'Realization'"),
    # CF standard name table: realization labels ensemble members; a scalar coordinate of one
    # member is still model output (CF 1.8 section 5.7, scalar coordinate variables)
    "scalar_realization": (dict(extra={"number": var((), 3, dtype="i4",
                                                      standard_name="realization")},
                                sst_attrs={"coordinates": "number"}),
                           "variable 'number' with standard_name realization"),
    # CF standard name table: forecast_period (lead time), forecast_reference_time
    "forecast_period": (dict(extra={"step": var((), 12.0, standard_name="forecast_period",
                                                units="hours")}),
                        "standard_name forecast_period"),
    "forecast_reference_time": (dict(extra={"t0": var((), 0.0,
                                                      standard_name="forecast_reference_time",
                                                      units="hours since 2026-11-19")}),
                                "standard_name forecast_reference_time"),
    # CF 1.8 section 7.3 (cell_methods may name a standard_name): an ensemble mean
    "ensemble_mean": (dict(sst_attrs={"cell_methods": "realization: mean"}),
                      "cell_methods over realization"),
    # CF 1.8 section 4.3.3 and appendix D: ocean s-coordinate with formula_terms
    "parametric_vertical": (dict(extra={"s_rho": var(("lat",), [-0.9, -0.1],
                                                     standard_name="ocean_s_coordinate_g2",
                                                     formula_terms="s: s_rho C: Cs_r eta: zeta "
                                                                   "depth: h depth_c: hc")}),
                            "formula_terms"),
    # UGRID 1.0: the mesh topology variable carries cf_role = "mesh_topology"
    "ugrid_mesh": (dict(extra={"mesh": var((), 0, dtype="i4", cf_role="mesh_topology",
                                           topology_dimension=2)}),
                   "cf_role mesh_topology"),
    # SGRID 0.3: the grid variable carries cf_role = "grid_topology"
    "sgrid": (dict(extra={"grid": var((), 0, dtype="i4", cf_role="grid_topology",
                                      topology_dimension=2)}),
              "cf_role grid_topology"),
    # CMIP6 global attributes (from memory): realization_index, source_type of a model
    "cmip6_realization_index": (dict(realization_index=1), "global attribute 'realization_index'"),
    "cmip6_source_type": (dict(source_type="OGCM BGC"), "source_type 'OGCM BGC'"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_model_output_is_claimed_by_no_reader_and_refused_by_every_kind(tmp_path, case):
    arguments, sign = CASES[case]
    path = sst_grid_with(tmp_path / f"{case}.nc", **arguments)
    with pytest.raises(NotObservationsError) as auto:
        guess_kind(path)
    with pytest.raises(NotObservationsError):
        read(path)
    message = str(auto.value)
    assert message.startswith(path + ": not observations: ") and sign in message
    assert "\n" not in message
    for kind in ("sst_grid", "sst_swath", "ghrsst_l2p"):
        with pytest.raises(NotObservationsError) as named:
            read(path, kind=kind)
        assert str(named.value) == message  # the reason, not a reader's complaint
    # still a NoReaderError (no reader claims it): callers that handle that keep working
    assert isinstance(auto.value, NoReaderError)


def test_observation_signs_of_the_same_conventions_are_not_model_output(tmp_path):
    # obs4MIPs-style observations under CMIP6-like attributes: source_type is an observation
    # type (from memory: "satellite_retrieval"); a dimension merely containing "mem" or "ens"
    # inside its name (e.g. "measurement", "sensor") is no ensemble
    path = sst_grid_with(tmp_path / "obs.nc", dims={"measurement": 2, "sensor": 1},
                         source_type="satellite_retrieval", mip_era="CMIP6",
                         source="satellite observations")
    assert model_output_signs(xr.open_dataset(path)) == []


def test_the_demo_ensemble_file_is_not_observations(tmp_path):
    scenario = _Scenario(root=tmp_path, analysis_time=np.datetime64("2026-11-20T00:00:00", "s"),
                         seed=1, scale=0.05)
    path, _ = write_ensemble(scenario, members=2)
    with pytest.raises(NotObservationsError) as info:
        read(path)
    message = str(info.value)
    assert str(path) in message and "dimension 'member'" in message
    assert "standard_name realization" in message
    with pytest.raises(NotObservationsError):
        read(path, kind="sst_swath")  # the reader that used to take it as 4.7 M SST pixels


def test_a_profile_can_take_away_an_attribute_sign(tmp_path):
    # the documented escape for an observation file wrongly taken for model output: the
    # reader profile removes the attribute before the signs are looked for
    path = sst_grid_with(tmp_path / "ens_mean.nc", sst_attrs={"cell_methods": "realization: mean"})
    profile = {"attributes": {"sst": {"cell_methods": False}}}
    with pytest.raises(NotObservationsError):
        read(path)
    assert len(read_checked(path, reader_profile=profile)) == 6


#: the real provider files of ../shared/realdata (its README): all observations
REAL_OBSERVATION_FILES = {
    "sst/SS_VIIRS_NPP-NAVO-L2P-v3.0__l2ss-cut.nc": "US Naval Oceanographic Office, PO.DAAC",
    "sst/SS_MODIS_A-JPL-L2P-v2014.0__l2ss-cut.nc": "NASA JPL, PO.DAAC",
    "argo/D4900882_029.nc": "Argo GDAC (MEDS float)",
    "argo/R13857_001.nc": "Argo GDAC (AOML float)",
    "argo/6901744_prof.nc": "Argo GDAC (Coriolis float)",
    "altimetry/JA1_GPN_2PeP001_002_20020115_060706_20020115_070316.nc": "CNES/NASA, PO.DAAC",
    "seaice/seaice_conc_daily_nh_20211231_f17_v04r00.nc": "NOAA/NSIDC",
    "insitu/sp025-20141125T1730_glider_trajectoryProfile.nc": "Scripps, US IOOS glider DAC",
    "insitu/IMOS_SOOP-XBT_T_20160106T110100Z_PX02_FV01_ID-150739.nc": "IMOS",
    "insitu/1dy11_seacat_ctd_profiles.nc": "NOAA Alaska Fisheries Science Center",
}


@pytest.mark.parametrize("relative", sorted(REAL_OBSERVATION_FILES))
def test_no_real_observation_file_is_taken_for_model_output(relative):
    # the providers (named above) distribute these as observations: no sign may fire
    from realdata import real_file

    from obsprep.readers.cf import open_dataset

    ds = open_dataset(real_file(relative), load=False)
    try:
        assert model_output_signs(ds) == [], REAL_OBSERVATION_FILES[relative]
    finally:
        ds.close()
