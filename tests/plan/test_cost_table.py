"""TableCost: hours read from a table, interpolated log-log, scaled photon-limited in magnitude, refused when bad."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, Table

from perierr.errors import InputError
from perierr.plan.cost import PhotonLimitedCost, Reference, TableCost

RV = {"input": ["radial_velocity"] * 3, "precision": [1.0, 0.3, 0.05], "hours": [0.5, 4.0, 60.0]}


def _reference_hours(prec, precs, hours):
    """numpy.interp in log-log space: the reference interpolation."""
    order = np.argsort(precs)
    return float(np.exp(np.interp(np.log(prec), np.log(np.asarray(precs)[order]), np.log(np.asarray(hours)[order]))))


@pytest.mark.parametrize("prec", [1.0, 0.7, 0.3, 0.2, 0.1, 0.05])
def test_log_log_interpolation_matches_numpy(prec):
    cost = TableCost.from_table(Table(RV))
    assert cost.hours("radial_velocity", prec) == pytest.approx(_reference_hours(prec, RV["precision"], RV["hours"]),
                                                                rel=1e-12)


def test_hand_computed_midpoint():
    # between (1, 0.5 h) and (0.3, 4 h): log-log line, at s = sqrt(0.3) the geometric mean of the hours
    cost = TableCost.from_table(Table(RV))
    assert cost.hours("rv", math.sqrt(0.3)) == pytest.approx(math.sqrt(0.5 * 4.0), rel=1e-12)


def test_beyond_the_best_precision_is_not_reachable_and_looser_costs_the_loosest_row():
    cost = TableCost.from_table(Table(RV))
    assert math.isinf(cost.hours("radial_velocity", 0.049))
    assert cost.hours("radial_velocity", 3.0) == pytest.approx(0.5, rel=1e-12)
    assert not cost.covers("parallax") and cost.covers("rv")
    assert not cost.needs_magnitude("radial_velocity")


def test_magnitude_scaling_is_photon_limited():
    # hours x 10^(0.4 (m - m_row)) (common practice, no source)
    t = Table({**RV, "magnitude": [12.0, 12.0, 12.0]})
    cost = TableCost.from_table(t)
    assert cost.needs_magnitude("radial_velocity")
    assert cost.hours("radial_velocity", 0.3, 14.5) == pytest.approx(4.0 * 10 ** (0.4 * 2.5), rel=1e-12)
    assert cost.hours("radial_velocity", 1.0, 9.0) == pytest.approx(0.5 * 10 ** (0.4 * -3.0), rel=1e-12)
    with pytest.raises(InputError, match="magnitude"):
        cost.hours("radial_velocity", 0.3, None)


def test_rows_at_different_magnitudes_are_put_on_one_footing():
    # rows at 10 and 13 mag: both scaled to the star's magnitude first, then interpolated log-log
    t = Table({"input": ["parallax", "parallax"], "precision": [0.1, 0.02], "hours": [1.0, 30.0],
               "magnitude": [10.0, 13.0]})
    cost = TableCost.from_table(t)
    m = 11.0
    h1, h2 = 1.0 * 10 ** (0.4 * (m - 10.0)), 30.0 * 10 ** (0.4 * (m - 13.0))
    s = 0.05
    assert cost.hours("parallax", s, m) == pytest.approx(_reference_hours(s, [0.1, 0.02], [h1, h2]), rel=1e-12)


def test_a_power_law_table_reproduces_the_photon_limited_model():
    # photon-limited hours go as s^-2: log-log interpolation between two such rows is exact
    ref = Reference(sigma=1.0, magnitude=12.0, hours=1.0)
    photon = PhotonLimitedCost({"radial_velocity": ref})
    t = Table({"input": ["radial_velocity"] * 2, "precision": [1.0, 0.1], "hours": [1.0, 100.0],
               "magnitude": [12.0, 12.0]})
    table = TableCost.from_table(t)
    for s, m in ((0.5, 12.0), (0.2, 10.0), (0.13, 14.2)):
        assert table.hours("radial_velocity", s, m) == pytest.approx(photon.hours("radial_velocity", s, m), rel=1e-12)


def test_read_csv_and_ecsv_with_units(tmp_path):
    csv = tmp_path / "hours.csv"
    csv.write_text("input,precision,hours\nradial_velocity,1.0,0.5\nradial_velocity,0.3,4\nparallax,0.05,2\n")
    cost = TableCost.read(csv)
    assert cost.hours("parallax", 0.05) == pytest.approx(2.0, rel=1e-12)
    assert cost.hours("radial_velocity", 0.3) == pytest.approx(4.0, rel=1e-12)
    # precisions in uas and hours in minutes: astropy converts them (the reference for the units)
    q = QTable({"input": ["parallax", "parallax"], "precision": [50.0, 20.0] * u.uas, "hours": [60.0, 600.0] * u.min})
    path = tmp_path / "hours.ecsv"
    q.write(path)
    cost = TableCost.read(path)
    assert cost.hours("parallax", (20 * u.uas).to_value(u.mas)) == pytest.approx((600 * u.min).to_value(u.h), rel=1e-12)
    assert cost.to_dict()["inputs"]["parallax"][0]["precision"] == pytest.approx(0.02, rel=1e-12)


@pytest.mark.parametrize(
    "text, field, row",
    [
        ("input,precision,hours\nradial_velocity,1,0.5\nspeed,0.3,4\n", "input", 1),
        ("input,precision,hours\nradial_velocity,1,0.5\nradial_velocity,0.3,-4\n", "hours", 1),
        ("input,precision,hours\nradial_velocity,0,0.5\n", "precision", 0),
        ("input,precision,hours\nradial_velocity,1,0.5\nradial_velocity,1,2\n", "precision", 1),
        ("input,precision,hours\nradial_velocity,1,abc\n", "hours", 0),
        ("input,precision,hours,magnitude\nradial_velocity,1,0.5,12\nradial_velocity,0.3,4,\n", "magnitude", 1),
        ("input,precision,hours,magnitude\nradial_velocity,1,0.5,40\n", "magnitude", 0),
    ],
)
def test_bad_rows_are_refused_with_their_row_number(tmp_path, text, field, row):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        TableCost.read(path)
    assert err.value.field == field and err.value.row == row
    assert f"row {row}" in str(err.value)


def test_bad_files_are_refused(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        TableCost.read(tmp_path / "none.csv")
    with pytest.raises(InputError, match=r"\.csv or \.ecsv"):
        TableCost.read(tmp_path / "hours.txt")
    (tmp_path / "cols.csv").write_text("input,sigma,hours\nparallax,0.1,1\n")
    with pytest.raises(InputError, match="no column precision"):
        TableCost.read(tmp_path / "cols.csv")
    (tmp_path / "empty.csv").write_text("input,precision,hours\n")
    with pytest.raises(InputError, match="no rows"):
        TableCost.read(tmp_path / "empty.csv")
    cost = TableCost.from_table(Table(RV))
    with pytest.raises(InputError, match="no rows for parallax"):
        cost.hours("parallax", 0.1)


# an exposure-time calculator's grid: 3 precisions x 3 magnitudes of radial_velocity (invented numbers)
GRID_PRECS = [1.0, 0.3, 0.1]
GRID_MAGS = [10.0, 12.0, 14.0]
GRID_HOURS = np.array([[0.2, 0.9, 6.0], [1.5, 8.0, 55.0], [12.0, 70.0, 480.0]])  # rows: precision; columns: mag


def _grid_table():
    precs, mags = np.meshgrid(GRID_PRECS, GRID_MAGS, indexing="ij")
    return Table({"input": ["radial_velocity"] * 9, "precision": precs.ravel(), "magnitude": mags.ravel(),
                  "hours": GRID_HOURS.ravel()})


def _grid_reference(prec, m):
    """The reference: numpy.interp in magnitude on ln hours at each precision (photon-limited beyond the grid,
    hours x 10^(0.4 (m - m_end)), common practice, no source), then numpy.interp in (ln precision, ln hours)."""
    log_h = []
    for k in range(len(GRID_PRECS)):
        row = np.log(GRID_HOURS[k])
        if m < GRID_MAGS[0]:
            log_h.append(row[0] + 0.4 * math.log(10) * (m - GRID_MAGS[0]))
        elif m > GRID_MAGS[-1]:
            log_h.append(row[-1] + 0.4 * math.log(10) * (m - GRID_MAGS[-1]))
        else:
            log_h.append(np.interp(m, GRID_MAGS, row))
    order = np.argsort(GRID_PRECS)
    return float(np.exp(np.interp(math.log(prec), np.log(GRID_PRECS)[order], np.asarray(log_h)[order])))


@pytest.mark.parametrize("prec, m", [(0.3, 12.0), (0.3, 11.0), (0.5, 13.3), (0.1, 14.0), (0.2, 9.0), (1.0, 15.5),
                                     (0.17, 10.0)])
def test_a_precision_by_magnitude_grid_is_interpolated(prec, m):
    cost = TableCost.from_table(_grid_table())
    assert cost.needs_magnitude("radial_velocity")
    assert cost.hours("radial_velocity", prec, m) == pytest.approx(_grid_reference(prec, m), rel=1e-12)


def test_grid_points_by_hand():
    cost = TableCost.from_table(_grid_table())
    # on a grid point: the table's own hours
    assert cost.hours("radial_velocity", 0.3, 14.0) == pytest.approx(55.0, rel=1e-12)
    # halfway in magnitude (11 mag) at 0.3 km/s: linear in ln hours, the geometric mean of 1.5 h and 8 h
    assert cost.hours("radial_velocity", 0.3, 11.0) == pytest.approx(math.sqrt(1.5 * 8.0), rel=1e-12)
    # 1 mag fainter than the grid at 1 km/s: 6 h x 10^0.4 (photon-limited from 14 mag)
    assert cost.hours("radial_velocity", 1.0, 15.0) == pytest.approx(6.0 * 10**0.4, rel=1e-12)
    assert math.isinf(cost.hours("radial_velocity", 0.09, 12.0))
    rows = cost.to_dict()["inputs"]["radial_velocity"]
    assert len(rows) == 9 and rows[0] == {"precision": 0.1, "unit": "km / s", "magnitude": 10.0, "hours": 12.0}


def test_a_repeated_grid_point_is_refused():
    t = _grid_table()
    t.add_row(["radial_velocity", 0.3, 12.0, 9.0])
    with pytest.raises(InputError, match="precision and magnitude") as err:
        TableCost.from_table(t)
    assert err.value.field == "precision" and err.value.row == 9
