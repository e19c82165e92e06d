"""Tests of obsprep.geo.grid: locating positions on regular, projected and curvilinear grids, layers,
axis angles and vector rotation, rejection reasons, grid files and the [grid] configuration.

Every check names its reference beside it.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from pyproj import CRS, Geod, Proj, Transformer
from scipy.spatial import cKDTree

from obsprep.exceptions import ConfigError, GridError, InputFileError
from obsprep.geo.grid import (
    EARTH_MEAN_RADIUS_M,
    CurvilinearGrid,
    ProjectedGrid,
    RegularGrid,
    east_north_to_grid,
    grid_from_config,
    grid_to_east_north,
    layer_interfaces_from_depths,
    write_grid_file,
)
from obsprep.geo.sphere import unit_vectors_from_lonlat, wrap_longitude

WGS84 = "EPSG:4326"


def _wrapped_difference(a, b):
    """a - b for angles in radians, wrapped into (-pi, pi]."""
    return np.angle(np.exp(1j * (np.asarray(a) - np.asarray(b))))


# --- projected grids ------------------------------------------------------------------------

SNYDER_CRS = "+proj=stere +lat_0=-90 +lat_ts=-71 +lon_0=-100 +ellps=intl +units=m +no_defs"


def test_snyder_polar_stereographic_example():
    # [Snyder1987], Map Projections: A Working Manual, USGS PP 1395, polar stereographic
    # ellipsoidal numerical example (from memory; PROJ reproduces it to 0.1 m):
    # International 1924 ellipsoid, standard parallel 71 S, central meridian 100 W,
    # 75 S 150 E -> x = -1 540 033.6 m, y = -560 526.4 m.
    x_expected, y_expected = -1_540_033.6, -560_526.4
    crs = CRS.from_user_input(SNYDER_CRS)
    assert crs.ellipsoid.semi_major_metre == 6_378_388.0
    assert crs.ellipsoid.inverse_flattening == pytest.approx(297.0)
    # 10 km cells; the cell (j, i) = (3, 5) spans x -1 550 000 .. -1 540 000, y -570 000 .. -560 000
    grid = ProjectedGrid(SNYDER_CRS, x_min=-1_600_000.0, y_min=-600_000.0, dx=10_000.0,
                         dy=10_000.0, nx=12, ny=8)
    x, y = grid.lonlat_to_xy(150.0, -75.0)
    assert x == pytest.approx(x_expected, abs=0.1)
    assert y == pytest.approx(y_expected, abs=0.1)
    i, j = grid.locate(150.0, -75.0)
    assert (int(i), int(j)) == (5, 3)


def test_projected_locate_equals_proj_transform_and_floor():
    # Reference: PROJ (via pyproj) forward transform of WGS 84 lon/lat, then floor of the
    # offsets in cell widths, straight from the definition of the cells.
    grid = ProjectedGrid("EPSG:3413", x_min=-2.0e6, y_min=-1.5e6, dx=25e3, dy=20e3, nx=150,
                         ny=140)
    rng = np.random.default_rng(3413)
    lon = rng.uniform(-180.0, 180.0, 20_000)
    lat = rng.uniform(40.0, 90.0, 20_000)
    x, y = Transformer.from_crs(WGS84, "EPSG:3413", always_xy=True).transform(lon, lat)
    i_ref = np.floor((x + 2.0e6) / 25e3).astype(np.int64)
    j_ref = np.floor((y + 1.5e6) / 20e3).astype(np.int64)
    outside = (i_ref < 0) | (i_ref >= 150) | (j_ref < 0) | (j_ref >= 140)
    i_ref[outside] = -1
    j_ref[outside] = -1
    i, j = grid.locate(lon, lat)
    assert outside.sum() > 1000 and (~outside).sum() > 1000  # both cases exercised
    np.testing.assert_array_equal(i, i_ref)
    np.testing.assert_array_equal(j, j_ref)


def test_projected_axis_angle_matches_proj_meridian_convergence():
    # Reference: PROJ meridian convergence (pyproj Proj.get_factors), the angle from true north
    # to grid north, clockwise positive; on a conformal projection the +x axis lies at -gamma
    # counterclockwise from east.
    grid = ProjectedGrid("EPSG:3031", x_min=-3.0e6, y_min=-3.0e6, dx=100e3, dy=100e3, nx=60,
                         ny=60)
    gamma = Proj("EPSG:3031").get_factors(grid.lon_center, grid.lat_center).meridian_convergence
    error = _wrapped_difference(grid.angle, -np.radians(gamma))
    assert np.abs(error).max() < 1e-8  # rad; both are finite differences of the same projection
    # a hand check of the sign: south polar stereographic with central meridian 0 has
    # x = rho sin(lon), y = rho cos(lon) ([Snyder1987], polar stereographic formulas; from
    # memory), so north (radially outward) is at 90 deg - lon from +x and the +x axis at
    # a = lon from east; e.g. at 90 E, +x points north.
    expected = np.radians(grid.lon_center)
    assert np.abs(_wrapped_difference(grid.angle, expected)).max() < 1e-8


def test_projected_axis_angle_on_equal_area_projection_follows_the_x_direction():
    # Reference: PROJ partial derivatives (Proj.get_factors dx_dlam ... dy_dphi, normalised by
    # the semi-major axis).  The +x direction in (lambda, phi) is J^-1 (1, 0); its east and
    # north lengths are N cos(phi) dlambda and M dphi with the WGS 84 radii of curvature
    # N = a / W, M = a (1 - e^2) / W^3, W = sqrt(1 - e^2 sin^2 phi) (any geodesy text; from
    # memory).  Lambert azimuthal equal-area is not conformal, so this is not -gamma.
    grid = ProjectedGrid("EPSG:6931", x_min=-4.0e6, y_min=-4.0e6, dx=200e3, dy=200e3, nx=40,
                         ny=40)
    f = Proj("EPSG:6931").get_factors(grid.lon_center, grid.lat_center)
    a, flattening = 6_378_137.0, 1.0 / 298.257223563
    e2 = flattening * (2.0 - flattening)
    phi = np.radians(grid.lat_center)
    w = np.sqrt(1.0 - e2 * np.sin(phi) ** 2)
    determinant = f.dx_dlam * f.dy_dphi - f.dx_dphi * f.dy_dlam
    d_lambda, d_phi = f.dy_dphi / determinant, -f.dy_dlam / determinant
    expected = np.arctan2(a * (1.0 - e2) / w ** 3 * d_phi, a / w * np.cos(phi) * d_lambda)
    assert np.abs(_wrapped_difference(grid.angle, expected)).max() < 1e-7
    # and it does differ from -gamma away from the pole, so the distinction is real
    gap = _wrapped_difference(grid.angle, -np.radians(f.meridian_convergence))
    assert np.abs(gap).max() > 1e-3


def test_projected_grid_rejects_geographic_crs_and_bad_spacing():
    with pytest.raises(GridError, match="not a map projection"):
        ProjectedGrid("EPSG:4326", 0, 0, 1, 1, 10, 10)
    with pytest.raises(GridError, match="positive"):
        ProjectedGrid("EPSG:3413", 0, 0, -1, 1, 10, 10)


# --- regular grids --------------------------------------------------------------------------

def test_regular_grid_across_the_dateline():
    # 170 E .. 170 W in 0.5 degree columns.  Reference: the cell definition
    # [lon_min + i dlon, lon_min + (i + 1) dlon) on longitudes unwrapped to 170..530, evaluated
    # with numpy.searchsorted over the column edges.
    grid = RegularGrid(lon_min=170.0, lat_min=-10.0, dlon=0.5, dlat=0.5, nlon=40, nlat=40)
    lon = np.array([170.0, 179.9, 180.0, -179.9, -170.25, -170.0, 169.99, 190.1, 530.1])
    lat = np.zeros(lon.size)
    i, j = grid.locate(lon, lat)
    unwrapped = np.where(lon < 170.0, lon + 360.0, lon)
    unwrapped = np.where(unwrapped >= 530.0, unwrapped - 360.0, unwrapped)
    edges = 170.0 + 0.5 * np.arange(41)
    i_ref = np.searchsorted(edges, unwrapped, side="right") - 1
    i_ref[(i_ref < 0) | (i_ref >= 40)] = -1
    np.testing.assert_array_equal(i, i_ref)
    # by hand: 179.9 E is column 19, 179.9 W column 20, 170 W is the (open) east edge
    assert i.tolist() == [0, 19, 20, 20, 39, -1, -1, -1, 0]  # 530.1 = 170.1 (mod 360)
    np.testing.assert_array_equal(j, np.where(i >= 0, 20, -1))
    # the same grid described west of -180 locates identically (longitudes modulo 360)
    shifted = RegularGrid(lon_min=-190.0, lat_min=-10.0, dlon=0.5, dlat=0.5, nlon=40, nlat=40)
    rng = np.random.default_rng(180)
    lon_r, lat_r = rng.uniform(-360.0, 360.0, 5000), rng.uniform(-15.0, 15.0, 5000)
    for a, b in zip(grid.locate(lon_r, lat_r), shifted.locate(lon_r, lat_r)):
        np.testing.assert_array_equal(a, b)
    # centres are reported in -180..180
    assert grid.lon_center[0, 19] == pytest.approx(179.75)
    assert grid.lon_center[0, 20] == pytest.approx(-179.75)


def test_global_regular_grid_is_periodic_and_includes_the_pole():
    grid = RegularGrid(lon_min=-180.0, lat_min=-90.0, dlon=1.0, dlat=1.0, nlon=360, nlat=180)
    i, j = grid.locate([-180.0, 180.0, 179.999, 0.0, 0.0], [0.0, 0.0, 0.0, 90.0, -90.0])
    assert i.tolist() == [0, 0, 359, 180, 180]  # 180 E and 180 W are one meridian
    assert j.tolist() == [90, 90, 90, 179, 0]  # the north pole is in the last row
    i, j = grid.locate([0.0, np.nan, 0.0], [90.5, 0.0, np.nan])
    assert i.tolist() == [-1, -1, -1] and j.tolist() == [-1, -1, -1]


def test_regular_grid_every_position_lies_in_its_cell():
    # Reference: the cell bounds themselves (centre +- half a cell, longitude modulo 360).
    grid = RegularGrid(lon_min=-30.0, lat_min=50.0, dlon=0.25, dlat=0.125, nlon=80, nlat=120)
    rng = np.random.default_rng(7)
    lon, lat = rng.uniform(-31.0, -9.0, 20_000), rng.uniform(49.0, 66.0, 20_000)
    i, j = grid.locate(lon, lat)
    inside = i >= 0
    d_lon = wrap_longitude(lon[inside] - grid.lon_center[j[inside], i[inside]])
    d_lat = lat[inside] - grid.lat_center[j[inside], i[inside]]
    assert np.all((d_lon >= -0.125 - 1e-12) & (d_lon < 0.125 + 1e-12))
    assert np.all((d_lat >= -0.0625 - 1e-12) & (d_lat < 0.0625 + 1e-12))
    expected_inside = (lon >= -30.0) & (lon < -10.0) & (lat >= 50.0) & (lat < 65.0)
    np.testing.assert_array_equal(inside, expected_inside)


def test_locate_in_small_chunks_equals_one_chunk():
    # memory-bounded processing must not change the answer (common practice)
    grid = CurvilinearGrid(*_rotated_affine_grid()[:2])
    rng = np.random.default_rng(11)
    lon, lat = rng.uniform(5.0, 35.0, 3000), rng.uniform(38.0, 62.0, 3000)
    whole = grid.locate(lon, lat)
    grid.chunk_size = 97
    chunked = grid.locate(lon, lat)
    np.testing.assert_array_equal(whole[0], chunked[0])
    np.testing.assert_array_equal(whole[1], chunked[1])
    assert (whole[0] >= 0).sum() > 500


# --- curvilinear grids ----------------------------------------------------------------------

def _rotated_affine_grid(ny=30, nx=45, spacing=0.5, rotation_deg=30.0, lon0=10.0, lat0=40.0):
    """A regular lon/lat grid rotated by ``rotation_deg`` about the centre of cell (0, 0):
    centre (j, i) at lon0 + d (i cos r - j sin r), lat0 + d (i sin r + j cos r)."""
    r = np.radians(rotation_deg)

    def centres(i, j):
        return (lon0 + spacing * (np.cos(r) * i - np.sin(r) * j),
                lat0 + spacing * (np.sin(r) * i + np.cos(r) * j))

    def indices(lon, lat):
        # the exact inverse of the affine map, as fractional indices
        a, b = (lon - lon0) / spacing, (lat - lat0) / spacing
        return np.cos(r) * a + np.sin(r) * b, -np.sin(r) * a + np.cos(r) * b

    j, i = np.mgrid[0:ny, 0:nx]
    lon, lat = centres(i, j)
    return lon, lat, centres, indices


def test_curvilinear_rotated_regular_grid_gives_the_exact_indices():
    # Reference: the analytic inverse of the rotation; cell (j, i) is [i - 1/2, i + 1/2) x
    # [j - 1/2, j + 1/2) in index space (cells of a regular grid around their centres).
    ny, nx = 30, 45
    lon, lat, centres, indices = _rotated_affine_grid(ny, nx)
    grid = CurvilinearGrid(lon, lat)
    rng = np.random.default_rng(30)
    fi, fj = rng.uniform(-3.0, nx + 2.0, 40_000), rng.uniform(-3.0, ny + 2.0, 40_000)
    p_lon, p_lat = centres(fi, fj)
    fi, fj = indices(p_lon, p_lat)
    i_ref = np.floor(fi + 0.5).astype(np.int64)
    j_ref = np.floor(fj + 0.5).astype(np.int64)
    outside = (i_ref < 0) | (i_ref >= nx) | (j_ref < 0) | (j_ref >= ny)
    i_ref[outside], j_ref[outside] = -1, -1
    i, j = grid.locate(p_lon, p_lat)
    assert outside.sum() > 1000
    np.testing.assert_array_equal(i, i_ref)
    np.testing.assert_array_equal(j, j_ref)


def test_curvilinear_copy_of_a_regular_grid_locates_like_the_regular_grid():
    # Reference: RegularGrid (floor of offsets, tested above); the grid crosses the dateline.
    regular = RegularGrid(lon_min=160.0, lat_min=-30.0, dlon=0.7, dlat=0.5, nlon=50, nlat=100)
    curvilinear = CurvilinearGrid(np.array(regular.lon_center), np.array(regular.lat_center))
    rng = np.random.default_rng(160)
    lon, lat = rng.uniform(155.0, 200.0, 30_000), rng.uniform(-35.0, 25.0, 30_000)
    for a, b in zip(regular.locate(lon, lat), curvilinear.locate(lon, lat)):
        np.testing.assert_array_equal(a, b)
    # and its computed axis angle is 0: a centred chord along a parallel points exactly east
    # (symmetry); the one-sided edge columns are second order, error below (dlon in rad)^2
    assert np.abs(curvilinear.angle[:, 1:-1]).max() < 1e-12
    assert np.abs(curvilinear.angle).max() < np.radians(0.7) ** 2


@pytest.fixture(scope="module")
def rotated_pole():
    """A 0.5 degree rotated-pole grid (CF rotated_latitude_longitude, pole 35 N 160 W) and the
    PROJ transforms between rotated and geographic coordinates."""
    rotated = CRS.from_cf({"grid_mapping_name": "rotated_latitude_longitude",
                           "grid_north_pole_latitude": 35.0,
                           "grid_north_pole_longitude": -160.0})
    to_geographic = Transformer.from_crs(rotated, WGS84, always_xy=True)
    to_rotated = Transformer.from_crs(WGS84, rotated, always_xy=True)
    spacing, rlon0, rlat0, ny, nx = 0.5, -15.0, -10.0, 40, 56  # corner of cell (0, 0)
    j, i = np.mgrid[0:ny, 0:nx]
    rlon, rlat = rlon0 + (i + 0.5) * spacing, rlat0 + (j + 0.5) * spacing
    lon, lat = to_geographic.transform(rlon, rlat)
    return dict(grid=CurvilinearGrid(lon, lat), to_geographic=to_geographic,
                to_rotated=to_rotated, spacing=spacing, rlon0=rlon0, rlat0=rlat0, ny=ny, nx=nx,
                lon=lon, lat=lat, rlon=rlon, rlat=rlat)


def test_curvilinear_rotated_pole_grid_matches_analytic_indices(rotated_pole):
    # Reference: PROJ (pyproj) rotated-pole transform; the exact cell is the floor of the
    # rotated coordinates in cell widths.  Rotated parallels are curved in lon/lat, so the
    # piecewise-bilinear model can only disagree within a computable band along cell edges:
    # the deviation, in cells, of the lon/lat midpoints of neighbouring centres from the true
    # rotated midpoints (along the edge) plus that of the neighbouring pair across it (the
    # sagitta); three times the sagitta in the extrapolated outer half cells, where the chord
    # error |t (t - 1)| at t = -1/2 is three times that at t = 1/2.
    g = rotated_pole
    d, ny, nx = g["spacing"], g["ny"], g["nx"]
    lon, lat, rlon, rlat = g["lon"], g["lat"], g["rlon"], g["rlat"]
    to_rotated = g["to_rotated"]
    m_rlon, m_rlat = to_rotated.transform(0.5 * (lon[:, 1:] + lon[:, :-1]),
                                          0.5 * (lat[:, 1:] + lat[:, :-1]))
    along_i = np.abs(m_rlon - 0.5 * (rlon[:, 1:] + rlon[:, :-1])).max() / d
    across_i = np.abs(m_rlat - rlat[:, 1:]).max() / d
    m_rlon, m_rlat = to_rotated.transform(0.5 * (lon[1:] + lon[:-1]), 0.5 * (lat[1:] + lat[:-1]))
    along_j = np.abs(m_rlat - 0.5 * (rlat[1:] + rlat[:-1])).max() / d
    across_j = np.abs(m_rlon - rlon[1:]).max() / d

    rng = np.random.default_rng(35)
    p_rlon = rng.uniform(g["rlon0"] - 1.0, g["rlon0"] + nx * d + 1.0, 60_000)
    p_rlat = rng.uniform(g["rlat0"] - 1.0, g["rlat0"] + ny * d + 1.0, 60_000)
    p_lon, p_lat = g["to_geographic"].transform(p_rlon, p_rlat)
    fi, fj = (p_rlon - g["rlon0"]) / d, (p_rlat - g["rlat0"]) / d
    i_ref, j_ref = np.floor(fi).astype(np.int64), np.floor(fj).astype(np.int64)
    inside_ref = (i_ref >= 0) & (i_ref < nx) & (j_ref >= 0) & (j_ref < ny)
    i, j = g["grid"].locate(p_lon, p_lat)
    inside = i >= 0
    outer_row = (fj < 0.5) | (fj > ny - 0.5)
    outer_col = (fi < 0.5) | (fi > nx - 0.5)
    band_i = np.where(outer_row, along_i + 3 * across_j, along_i + across_j)
    band_j = np.where(outer_col, along_j + 3 * across_i, along_j + across_i)
    both = inside & inside_ref
    wrong_i = both & (i != i_ref)
    wrong_j = both & (j != j_ref)
    assert np.all(np.abs(fi - np.round(fi))[wrong_i] <= band_i[wrong_i])
    assert np.all(np.abs(fj - np.round(fj))[wrong_j] <= band_j[wrong_j])
    # inside/outside disagreements only within the outer bands of the outer edges
    differ = inside != inside_ref
    to_outer_i = np.minimum(np.abs(fi), np.abs(fi - nx))
    to_outer_j = np.minimum(np.abs(fj), np.abs(fj - ny))
    near_edge = ((to_outer_i <= along_i + 3 * across_j) | (to_outer_j <= along_j + 3 * across_i))
    assert np.all(near_edge[differ])
    # and the band is thin: nearly every position gets the exact cell
    assert (wrong_i | wrong_j | differ).mean() < 0.01
    assert np.all(i[~inside] == -1) and np.all(j[~inside] == -1)


def test_curvilinear_agrees_with_kdtree_nearest_centre_away_from_edges(rotated_pole):
    # Reference: scipy cKDTree nearest centre (3-D unit vectors).  On a grid of near-square
    # cells the nearest centre is the containing cell except close to cell edges; positions at
    # least 0.1 cell from every edge are compared.
    g = rotated_pole
    d, ny, nx = g["spacing"], g["ny"], g["nx"]
    rng = np.random.default_rng(36)
    fi, fj = rng.uniform(0.0, nx, 40_000), rng.uniform(0.0, ny, 40_000)
    p_lon, p_lat = g["to_geographic"].transform(g["rlon0"] + fi * d, g["rlat0"] + fj * d)
    central = (np.abs(fi % 1.0 - 0.5) < 0.4) & (np.abs(fj % 1.0 - 0.5) < 0.4)
    tree = cKDTree(unit_vectors_from_lonlat(g["lon"], g["lat"]).reshape(-1, 3))
    _, nearest = tree.query(unit_vectors_from_lonlat(p_lon[central], p_lat[central]))
    j_ref, i_ref = np.divmod(nearest, nx)
    i, j = g["grid"].locate(p_lon[central], p_lat[central])
    np.testing.assert_array_equal(i, i_ref)
    np.testing.assert_array_equal(j, j_ref)


def test_curvilinear_polar_stereographic_grid_agrees_with_the_projection():
    # Reference: ProjectedGrid (PROJ forward transform + floor).  The same 25 km EPSG:3413 grid
    # given only by its centres (which surround the pole) must give the same cells except
    # within 1 % of a cell from an edge (pieces are bilinear in lon/lat or in spherical polar
    # stereographic coordinates, not in the ellipsoidal projection).
    projected = ProjectedGrid("EPSG:3413", x_min=-1.0e6, y_min=-1.0e6, dx=25e3, dy=25e3, nx=80,
                              ny=80)
    curvilinear = CurvilinearGrid(projected.lon_center, projected.lat_center)
    rng = np.random.default_rng(3413)
    x, y = rng.uniform(-1.1e6, 1.1e6, 40_000), rng.uniform(-1.1e6, 1.1e6, 40_000)
    lon, lat = projected.xy_to_lonlat(x, y)
    i_ref, j_ref = projected.locate(lon, lat)
    i, j = curvilinear.locate(lon, lat)
    fx, fy = (x + 1.0e6) / 25e3, (y + 1.0e6) / 25e3
    to_edge = np.minimum(np.abs(fx - np.round(fx)), np.abs(fy - np.round(fy)))
    wrong = (i != i_ref) | (j != j_ref)
    assert np.all(to_edge[wrong] < 0.01)
    assert wrong.mean() < 0.005
    # the north pole itself lies on the corner of four cells: it must be in one of them
    i_pole, j_pole = curvilinear.locate(0.0, 90.0)
    assert int(i_pole) in (39, 40) and int(j_pole) in (39, 40)


def test_curvilinear_computed_angle_matches_file_angle(tmp_path):
    # Reference: PROJ meridian convergence (Proj.get_factors) of EPSG:3413 at the centres,
    # written into the file as the CF angle_of_rotation_from_east_to_x (= -gamma, conformal).
    # Read back it must be returned as written; dropped from the file, the angle computed from
    # centred differences of the centres must match to second order: error below
    # (dx / R)^2 rad with R the Earth radius (truncation of a centred difference).
    projected = ProjectedGrid("EPSG:3413", x_min=-1.0e6, y_min=-1.0e6, dx=25e3, dy=25e3, nx=80,
                              ny=80)
    gamma = Proj("EPSG:3413").get_factors(projected.lon_center,
                                          projected.lat_center).meridian_convergence
    file_angle = -np.radians(gamma)
    with_angle = write_grid_file(tmp_path / "with.nc", projected.lon_center, projected.lat_center,
                                 True, 1000.0, angle=file_angle)
    without = write_grid_file(tmp_path / "without.nc", projected.lon_center,
                              projected.lat_center, True, 1000.0)
    read = CurvilinearGrid.from_file(with_angle)
    np.testing.assert_allclose(_wrapped_difference(read.angle, file_angle), 0.0, atol=1e-12)
    computed = CurvilinearGrid.from_file(without)
    tolerance = (25e3 / EARTH_MEAN_RADIUS_M) ** 2
    assert np.abs(_wrapped_difference(computed.angle, file_angle)).max() < tolerance


def test_curvilinear_angle_in_radians_is_read_per_units(tmp_path):
    # CF units of the angle decide degree or radian (CF conventions, units attribute)
    lon, lat, _, _ = _rotated_affine_grid(6, 7)
    path = write_grid_file(tmp_path / "g.nc", lon, lat, True, 100.0, angle=np.full(lon.shape, 0.3))
    with xr.open_dataset(path) as ds:
        ds = ds.load()
    ds["angle"] = np.radians(ds["angle"]).assign_attrs(ds["angle"].attrs, units="radian")
    ds.to_netcdf(tmp_path / "rad.nc")
    np.testing.assert_allclose(CurvilinearGrid.from_file(tmp_path / "rad.nc").angle, 0.3,
                               atol=1e-12)
    ds["angle"].attrs["units"] = "furlong"
    ds.to_netcdf(tmp_path / "bad.nc")
    with pytest.raises(InputFileError, match="angle.*degree' or 'radian") as err:
        CurvilinearGrid.from_file(tmp_path / "bad.nc")
    assert "bad.nc" in str(err.value)


# --- rotation ----------------------------------------------------------------------------------

def test_rotation_preserves_length_and_matches_hand_rotation():
    # Reference: rotation of axes by hand.  With the +x axis at 30 deg counterclockwise from
    # east, a unit eastward vector has components cos 30 = 0.8660 along x and
    # cos 120 = -0.5 along y; a unit northward vector sin 30 = 0.5 and cos 30 = 0.8660.
    u_x, v_y = east_north_to_grid([1.0, 0.0], [0.0, 1.0], np.radians(30.0))
    np.testing.assert_allclose(u_x, [np.sqrt(3) / 2, 0.5], atol=1e-15)
    np.testing.assert_allclose(v_y, [-0.5, np.sqrt(3) / 2], atol=1e-15)
    rng = np.random.default_rng(5)
    u, v, a = rng.normal(size=1000), rng.normal(size=1000), rng.uniform(-np.pi, np.pi, 1000)
    u_x, v_y = east_north_to_grid(u, v, a)
    np.testing.assert_allclose(np.hypot(u_x, v_y), np.hypot(u, v), rtol=1e-13)
    back_u, back_v = grid_to_east_north(u_x, v_y, a)
    np.testing.assert_allclose(back_u, u, atol=1e-13)
    np.testing.assert_allclose(back_v, v, atol=1e-13)


def test_grid_rotation_matches_displacement_through_the_projection():
    # Reference: pyproj.Geod (GeographicLib, [Karney2013]) moves each cell centre 10 m along the
    # vector's azimuth; PROJ projects start and end; on a conformal projection the map
    # displacement has the direction of the vector's grid components.
    grid = ProjectedGrid("EPSG:3031", x_min=-3.0e6, y_min=-3.0e6, dx=100e3, dy=100e3, nx=60,
                         ny=60)
    rng = np.random.default_rng(31)
    i, j = rng.integers(0, 60, 200), rng.integers(0, 60, 200)
    u, v = rng.normal(size=200), rng.normal(size=200)
    lon, lat = grid.lon_center[j, i], grid.lat_center[j, i]
    azimuth = np.degrees(np.arctan2(u, v))  # clockwise from north
    lon2, lat2, _ = Geod(ellps="WGS84").fwd(lon, lat, azimuth, np.full(200, 10.0))
    x1, y1 = grid.lonlat_to_xy(lon, lat)
    x2, y2 = grid.lonlat_to_xy(lon2, lat2)
    u_x, v_y = grid.east_north_to_grid(u, v, i, j)
    expected = np.arctan2(y2 - y1, x2 - x1)
    assert np.abs(_wrapped_difference(np.arctan2(v_y, u_x), expected)).max() < 1e-6
    # outside the grid there is no axis: NaN
    assert np.isnan(grid.east_north_to_grid(1.0, 0.0, -1, -1)).all()


# --- layers and rejection reasons ---------------------------------------------------------------

def test_layer_index_intervals():
    # Reference: numpy.digitize with right=False, i.e. z_k <= depth < z_{k+1}.
    interfaces = [0.0, 10.0, 50.0, 200.0]
    grid = RegularGrid(0.0, 0.0, 1.0, 1.0, 2, 2, layer_interfaces=interfaces)
    depth = np.array([0.0, 9.999, 10.0, 49.0, 50.0, 199.9, 200.0, 5000.0, -0.1, np.nan])
    k = grid.layer_index(depth)
    reference = np.digitize(depth, interfaces) - 1
    valid = (depth >= 0) & (depth < 200.0)
    np.testing.assert_array_equal(k[valid], reference[valid])
    assert k.tolist() == [0, 0, 1, 1, 2, 2, -1, -1, -1, -1]
    assert k.dtype == np.int64


@pytest.mark.parametrize("depths", [[5.0, 10.0], [0.0, 10.0, 10.0], [0.0, 20.0, 10.0], [0.0],
                                    [0.0, np.nan], "shallow"])
def test_layer_interfaces_must_start_at_zero_and_increase(depths):
    with pytest.raises(GridError):
        layer_interfaces_from_depths(depths)


def test_classify_reasons_in_order():
    # Expected reasons worked by hand on a 3 x 4 grid of 1 degree cells from (0 E, 0 N):
    # land at (j, i) = (0, 0); bathymetry 100 m everywhere except 30 m at (1, 1) and unknown
    # (+inf) at (2, 3); layers 0-10-50-500 m.
    sea = np.ones((3, 4), bool)
    sea[0, 0] = False
    bathymetry = np.full((3, 4), 100.0)
    bathymetry[1, 1] = 30.0
    bathymetry[2, 3] = np.inf
    grid = RegularGrid(0.0, 0.0, 1.0, 1.0, 4, 3, sea_mask=sea, bathymetry=bathymetry,
                       layer_interfaces=[0.0, 10.0, 50.0, 500.0])
    lon = np.array([0.5, 0.5, 1.5, 1.5, 2.5, 3.5, 3.5, 5.0, np.nan, 2.5])
    lat = np.array([0.5, 0.5, 1.5, 1.5, 0.5, 2.5, 2.5, 0.5, 0.5, 2.5])
    depth = np.array([5.0, 900.0, 20.0, 40.0, 99.0, 600.0, 499.0, 5.0, 5.0, 100.5])
    i, j, k, reason = grid.classify(lon, lat, depth)
    assert reason.tolist() == ["land", "land", "", "below_bathymetry", "",
                               "below_deepest_layer", "", "outside_grid", "outside_grid",
                               "below_bathymetry"]
    assert i.tolist() == [0, 0, 1, 1, 2, 3, 3, -1, -1, 2]
    assert j.tolist() == [0, 0, 1, 1, 0, 2, 2, -1, -1, 2]
    assert k.tolist() == [0, -1, 1, 1, 2, -1, 2, 0, 0, 2]
    assert reason.dtype == object


# --- distances ---------------------------------------------------------------------------------

def test_cell_center_distance_against_geodesics():
    # Reference: pyproj.Geod (GeographicLib, [Karney2013]): on a sphere of the mean radius the
    # haversine distance is the geodesic (agreement to 1e-9 relative).  Against the WGS 84
    # ellipsoid the ratio is bounded by the extreme radii of curvature, from the meridional
    # radius at the equator a (1 - e^2) to the polar radius a / sqrt(1 - e^2) (geodesy texts,
    # from memory), i.e. sphere / ellipsoid within [R / (a / sqrt(1 - e^2)), R / (a (1 - e^2))].
    grid = RegularGrid(lon_min=-180.0, lat_min=-80.0, dlon=2.0, dlat=2.0, nlon=180, nlat=80)
    rng = np.random.default_rng(8)
    lon, lat = rng.uniform(-180.0, 180.0, 5000), rng.uniform(-80.0, 80.0, 5000)
    i, j = grid.locate(lon, lat)
    distance = grid.cell_center_distance(lon, lat, i, j)
    c_lon, c_lat = grid.lon_center[j, i], grid.lat_center[j, i]
    _, _, sphere = Geod(a=EARTH_MEAN_RADIUS_M, b=EARTH_MEAN_RADIUS_M).inv(lon, lat, c_lon, c_lat)
    np.testing.assert_allclose(distance, sphere, rtol=1e-9, atol=1e-6)
    _, _, ellipsoid = Geod(ellps="WGS84").inv(lon, lat, c_lon, c_lat)
    a, flattening = 6_378_137.0, 1.0 / 298.257223563
    e2 = flattening * (2.0 - flattening)
    ratio = distance / ellipsoid
    assert ratio.min() >= EARTH_MEAN_RADIUS_M / (a / np.sqrt(1.0 - e2))
    assert ratio.max() <= EARTH_MEAN_RADIUS_M / (a * (1.0 - e2))
    assert np.isnan(grid.cell_center_distance(0.0, 0.0, -1, -1))


# --- grid files ----------------------------------------------------------------------------------

def test_grid_file_round_trip(tmp_path):
    # Reference: the arrays written (write_grid_file -> CurvilinearGrid.from_file).
    lon, lat, _, _ = _rotated_affine_grid(12, 9, lon0=175.0)  # crosses the dateline
    rng = np.random.default_rng(2)
    sea = rng.random(lon.shape) > 0.3
    bathymetry = rng.uniform(10.0, 4000.0, lon.shape)
    bathymetry[0, 0] = np.inf  # unknown
    angle = rng.uniform(-np.pi, np.pi, lon.shape)
    path = write_grid_file(tmp_path / "grid.nc", lon, lat, sea, bathymetry, angle=angle)
    grid = CurvilinearGrid.from_file(path, layer_interfaces=[0.0, 25.0, 100.0])
    np.testing.assert_allclose(grid.lon_center, wrap_longitude(lon), atol=1e-12)
    np.testing.assert_array_equal(grid.lat_center, lat)
    np.testing.assert_array_equal(grid.sea_mask, sea)
    np.testing.assert_array_equal(grid.bathymetry, bathymetry)
    np.testing.assert_allclose(_wrapped_difference(grid.angle, angle), 0.0, atol=1e-12)
    np.testing.assert_array_equal(grid.layer_interfaces, [0.0, 25.0, 100.0])
    with xr.open_dataset(path) as ds:  # CF metadata the reader relies on
        assert ds["sea_mask"].attrs["standard_name"] == "sea_binary_mask"
        assert ds["bathymetry"].attrs["standard_name"] == "sea_floor_depth_below_geoid"
        assert ds["angle"].attrs["standard_name"] == "angle_of_rotation_from_east_to_x"


def test_projected_grid_dataset_reads_back_as_curvilinear(tmp_path):
    # Reference: ProjectedGrid itself; its to_dataset() written to netCDF is a grid file.
    sea = np.ones((20, 30), bool)
    sea[5:8, 10:20] = False
    projected = ProjectedGrid("EPSG:3413", x_min=-5e5, y_min=-5e5, dx=25e3, dy=25e3, nx=30,
                              ny=20, sea_mask=sea, bathymetry=np.full((20, 30), 3000.0))
    ds = projected.to_dataset()
    assert CRS.from_cf(ds["crs"].attrs) == CRS.from_user_input("EPSG:3413")
    ds.to_netcdf(tmp_path / "projected.nc")
    grid = CurvilinearGrid.from_file(tmp_path / "projected.nc")
    np.testing.assert_array_equal(grid.sea_mask, sea)
    np.testing.assert_allclose(grid.angle, projected.angle, atol=1e-12)
    j, i = np.indices((20, 30))
    found = grid.locate(projected.lon_center, projected.lat_center)
    np.testing.assert_array_equal(found[0], i)
    np.testing.assert_array_equal(found[1], j)


def test_land_binary_mask_and_fields_by_variable_name(tmp_path):
    # CF standard name table (from memory): land_binary_mask is 1 on land, sea_binary_mask 1 on
    # sea.  A file must yield a mask and a bathymetry, by standard_name or by the variable names
    # of the configuration; one lacking either is an error naming the file and what is missing.
    lon, lat, _, _ = _rotated_affine_grid(5, 6)
    land = np.zeros(lon.shape, np.int8)
    land[2, 3] = 1
    ds = xr.Dataset({"land": (("y", "x"), land, {"standard_name": "land_binary_mask"})},
                    coords={"glon": (("y", "x"), lon, {"standard_name": "longitude"}),
                            "glat": (("y", "x"), lat, {"standard_name": "latitude"})})
    ds.to_netcdf(tmp_path / "land.nc")
    with pytest.raises(InputFileError, match="no bathymetry.*bathymetry_variable") as err:
        CurvilinearGrid.from_file(tmp_path / "land.nc")
    assert "land.nc" in str(err.value)
    # a depth without standard_name, named explicitly; the land mask found by its standard_name
    depth = np.linspace(10.0, 300.0, lon.size).reshape(lon.shape)
    ds["hdepth"] = (("y", "x"), depth, {"units": "m"})
    ds.to_netcdf(tmp_path / "named_depth.nc")
    grid = CurvilinearGrid.from_file(tmp_path / "named_depth.nc", bathymetry_variable="hdepth")
    assert grid.sea_mask.sum() == lon.size - 1 and not grid.sea_mask[2, 3]
    np.testing.assert_array_equal(grid.bathymetry, depth)
    # no standard names at all: without a mapping the mask is missing (no longer all sea) ...
    bare = ds.drop_vars("land").assign(tmask=(("y", "x"), 1 - land))
    bare.to_netcdf(tmp_path / "bare.nc")
    with pytest.raises(InputFileError, match="no land/sea mask.*mask_variable") as err:
        CurvilinearGrid.from_file(tmp_path / "bare.nc", bathymetry_variable="hdepth")
    assert "bare.nc" in str(err.value) and "tmask" in str(err.value)  # the variables listed
    # ... and with it the named variable is read as 1 = sea (the sea_binary_mask convention)
    grid = CurvilinearGrid.from_file(tmp_path / "bare.nc", mask_variable="tmask",
                                     bathymetry_variable="hdepth")
    assert grid.sea_mask.sum() == lon.size - 1 and not grid.sea_mask[2, 3]
    # a named variable that is not in the file
    with pytest.raises(InputFileError, match="no variable 'mask'.*tmask"):
        CurvilinearGrid.from_file(tmp_path / "bare.nc", mask_variable="mask",
                                  bathymetry_variable="hdepth")


def test_bad_grid_files_name_file_and_variable(tmp_path):
    lon, lat, _, _ = _rotated_affine_grid(5, 6)
    base = write_grid_file(tmp_path / "ok.nc", lon, lat, True, 100.0)
    with xr.open_dataset(base) as ds:
        ds = ds.load()
    ds.drop_vars("lat").to_netcdf(tmp_path / "nolat.nc")
    with pytest.raises(InputFileError, match="latitude") as err:
        CurvilinearGrid.from_file(tmp_path / "nolat.nc")
    assert "nolat.nc" in str(err.value)
    bad_mask = ds.copy()
    bad_mask["sea_mask"] = bad_mask["sea_mask"] * 2
    bad_mask.to_netcdf(tmp_path / "mask2.nc")
    with pytest.raises(InputFileError, match="0 or 1") as err:
        CurvilinearGrid.from_file(tmp_path / "mask2.nc")
    assert err.value.variable == "sea_mask" and "mask2.nc" in str(err.value)
    elevation = ds.copy()
    elevation["bathymetry"] = -elevation["bathymetry"]
    elevation.to_netcdf(tmp_path / "elevation.nc")
    with pytest.raises(InputFileError, match="positive down") as err:
        CurvilinearGrid.from_file(tmp_path / "elevation.nc")
    assert err.value.variable == "bathymetry"
    with pytest.raises(InputFileError, match="does not exist"):
        CurvilinearGrid.from_file(tmp_path / "absent.nc")
    (tmp_path / "text.nc").write_text("not netCDF")
    with pytest.raises(InputFileError, match="text.nc"):
        CurvilinearGrid.from_file(tmp_path / "text.nc")


def test_mask_file_for_regular_grid(tmp_path):
    grid_args = dict(lon_min=-10.0, lat_min=50.0, dlon=0.5, dlat=0.25, nlon=8, nlat=6)
    template = RegularGrid(**grid_args)
    sea = np.ones((6, 8), bool)
    sea[0, :3] = False
    depth = np.linspace(5.0, 500.0, 48).reshape(6, 8)
    write_grid_file(tmp_path / "mask.nc", template.lon_center, template.lat_center, sea, depth)
    grid = RegularGrid(**grid_args, mask_file=tmp_path / "mask.nc")
    np.testing.assert_array_equal(grid.sea_mask, sea)
    np.testing.assert_array_equal(grid.bathymetry, depth)
    # a file stored north to south is caught by its own coordinates
    write_grid_file(tmp_path / "flipped.nc", template.lon_center, template.lat_center[::-1],
                    sea[::-1], depth[::-1])
    with pytest.raises(InputFileError, match="same index") as err:
        RegularGrid(**grid_args, mask_file=tmp_path / "flipped.nc")
    assert "flipped.nc" in str(err.value) and err.value.variable == "lon"
    # a mask on other cells: the message gives variable, expected and found shapes
    mask_only = xr.Dataset({"m": (("a", "b"), np.ones((5, 8), np.int8),
                                  {"standard_name": "sea_binary_mask"}),
                            "h": (("a", "b"), np.full((5, 8), 50.0),
                                  {"standard_name": "sea_floor_depth_below_geoid"})})
    mask_only.to_netcdf(tmp_path / "small.nc")
    with pytest.raises(InputFileError) as err:
        RegularGrid(**grid_args, mask_file=tmp_path / "small.nc")
    message = str(err.value)
    assert "small.nc" in message and "'m'" in message and "(6, 8)" in message \
        and "(5, 8)" in message


def test_mask_file_for_projected_grid_without_coordinates(tmp_path):
    sea = np.zeros((4, 5), np.int8)
    sea[1:, 1:] = 1
    xr.Dataset({"sea": (("row", "col"), sea, {"standard_name": "sea_binary_mask"}),
                "h": (("row", "col"), np.full((4, 5), 250.0),
                      {"standard_name": "sea_floor_depth_below_sea_surface", "units": "m"})}
               ).to_netcdf(tmp_path / "ps_mask.nc")
    grid = ProjectedGrid("EPSG:3413", -5e4, -5e4, 25e3, 25e3, 5, 4,
                         mask_file=tmp_path / "ps_mask.nc")
    np.testing.assert_array_equal(grid.sea_mask, sea == 1)
    np.testing.assert_array_equal(grid.bathymetry, 250.0)


# --- configuration ---------------------------------------------------------------------------

def test_grid_from_config_builds_each_type(tmp_path):
    regular = grid_from_config({"type": "regular", "lon_min": -20, "lat_min": 40, "dlon": 0.5,
                                "dlat": 0.5, "nlon": 10, "nlat": 8,
                                "layer_interfaces": [0.0, 50.0, 1000.0]}, tmp_path)
    assert isinstance(regular, RegularGrid) and regular.shape == (8, 10) and regular.nk == 2
    projected = grid_from_config({"type": "projected", "crs": "EPSG:3413", "x_min": -1e5,
                                  "y_min": -1e5, "dx": 25e3, "dy": 25e3, "nx": 8, "ny": 8},
                                 tmp_path)
    assert isinstance(projected, ProjectedGrid)
    np.testing.assert_array_equal(projected.layer_interfaces, [0.0, 1.0e4])  # one layer
    lon, lat, _, _ = _rotated_affine_grid(5, 6)
    (tmp_path / "grids").mkdir()
    write_grid_file(tmp_path / "grids" / "c.nc", lon, lat, True, 100.0)
    curvilinear = grid_from_config({"type": "curvilinear", "file": "grids/c.nc"}, tmp_path)
    assert isinstance(curvilinear, CurvilinearGrid) and curvilinear.shape == (5, 6)
    template = RegularGrid(0.0, 0.0, 1.0, 1.0, 3, 2)
    write_grid_file(tmp_path / "m.nc", template.lon_center, template.lat_center,
                    [[True, False, True], [True, True, True]], 10.0)
    masked = grid_from_config({"type": "regular", "lon_min": 0, "lat_min": 0, "dlon": 1,
                               "dlat": 1, "nlon": 3, "nlat": 2, "mask_file": "m.nc"}, tmp_path)
    assert masked.sea_mask.sum() == 5


REGULAR = {"type": "regular", "lon_min": -20, "lat_min": 40, "dlon": 0.5, "dlat": 0.5,
           "nlon": 10, "nlat": 8}


@pytest.mark.parametrize("change, key", [
    ({"dlat": None}, "grid.dlat"),                        # missing
    ({"dlatt": 0.5}, "grid.dlatt"),                       # unknown (a typo)
    ({"nlon": 2.5}, "grid.nlon"),                         # not an integer
    ({"dlon": -1.0}, "grid.dlon"),                        # not positive
    ({"lon_min": "west"}, "grid.lon_min"),                # not a number
    ({"type": "hexagonal"}, "grid.type"),
    ({"layer_interfaces": [0.0, 10.0, 5.0]}, "grid.layer_interfaces"),
    ({"layer_interfaces": "deep"}, "grid.layer_interfaces"),
    ({"mask_file": "absent.nc"}, "grid.mask_file"),
    ({"lat_min": 87.0}, "grid"),                          # 87 + 8 x 0.5 runs past the pole
])
def test_bad_config_names_the_key(tmp_path, change, key):
    cfg = dict(REGULAR)
    for name, value in change.items():
        if value is None:
            cfg.pop(name)
        else:
            cfg[name] = value
    with pytest.raises(ConfigError) as err:
        grid_from_config(cfg, tmp_path)
    assert err.value.key == key
    assert key in str(err.value)


@pytest.mark.parametrize("cfg, key", [
    ({"type": "projected", "crs": "EPSG:999999", "x_min": 0, "y_min": 0, "dx": 1, "dy": 1,
      "nx": 2, "ny": 2}, "grid.crs"),
    ({"type": "projected", "crs": "EPSG:4326", "x_min": 0, "y_min": 0, "dx": 1, "dy": 1,
      "nx": 2, "ny": 2}, "grid.crs"),
    ({"type": "projected", "crs": "EPSG:3413", "x_min": 0, "y_min": 0, "dx": 1, "dy": 1,
      "nx": 2}, "grid.ny"),
    ({"type": "curvilinear"}, "grid.file"),
    ({"type": "curvilinear", "file": "nowhere.nc"}, "grid.file"),
    ({"type": "curvilinear", "file": "x.nc", "mask_file": "m.nc"}, "grid.mask_file"),
])
def test_bad_projected_and_curvilinear_config(tmp_path, cfg, key):
    with pytest.raises(ConfigError) as err:
        grid_from_config(cfg, tmp_path)
    assert err.value.key == key


def test_grid_size_bounded_from_the_configuration_and_the_file_metadata(tmp_path):
    import netCDF4

    from obsprep.geo.grid import MAX_GRID_CELLS

    side = 10_000  # 1e8 cells: twice the limit
    assert side * side > MAX_GRID_CELLS
    with pytest.raises(ConfigError, match=f"exceeds the limit of {MAX_GRID_CELLS} cells") as err:
        grid_from_config({**REGULAR, "dlon": 1e-4, "nlon": side, "nlat": side, "dlat": 1e-4},
                         tmp_path)
    assert err.value.key == "grid.nlon"
    with pytest.raises(GridError, match="exceeds the limit"):
        ProjectedGrid("EPSG:3413", 0.0, 0.0, 1.0, 1.0, side, side)
    # a curvilinear grid file declaring 1e8 cells: refused from its dimensions, before the
    # 800 MB of each coordinate would be read (netCDF-4 stores unwritten chunks as fill values
    # without space, netCDF User Guide; so the file itself is small)
    path = tmp_path / "huge.nc"
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("y", side)
        nc.createDimension("x", side)
        for name, standard_name in (("lon", "longitude"), ("lat", "latitude")):
            var = nc.createVariable(name, "f8", ("y", "x"), chunksizes=(100, 100))
            var.standard_name = standard_name
    assert path.stat().st_size < 1e6
    with pytest.raises(ConfigError) as err:
        grid_from_config({"type": "curvilinear", "file": str(path)}, tmp_path)
    assert err.value.key == "grid.file" and "huge.nc" in str(err.value) \
        and "exceeds the limit" in str(err.value)
