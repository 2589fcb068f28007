"""The numeric core of model layers (hydroatlas.layering): contacts, surfaces, layers, K and starting heads.

Hand-built cases whose answers follow from the definitions (a plane, a thickness-weighted mean, a linear head
profile); the invented numbers are test inputs only.
"""

import numpy as np
import pytest

from hydroatlas import layering
from hydroatlas.errors import ParameterError
from hydroatlas.layering import ModelLayers

NAN = np.nan


# -- contacts at wells ----------------------------------------------------------------------------------------
def test_well_contacts_from_picks_absent_units_and_total_depth():
    """Contact j is the top of unit j; an absent unit's top and bottom are one; a pick at total depth gives no base."""
    ground = [100.0, 200.0, 300.0]
    # units A, B, C: well 1 has all three (C ends at total depth); well 2 lacks B (A touches C); well 3 has
    # no pick of A (its first pick, B, starts at the ground) and an unlogged gap between B and C
    top = [[100.0, 90.0, 80.0], [200.0, NAN, 185.0], [NAN, 300.0, 270.0]]
    bottom = [[90.0, 80.0, 40.0], [185.0, NAN, 150.0], [NAN, 274.0, 250.0]]
    known = [[True, True, False], [True, False, True], [False, True, True]]
    presence = [[1, 1, 1], [1, 0, 1], [0, 1, 1]]
    c, mismatch = layering.well_contacts(ground, top, bottom, known, presence)
    assert c.shape == (3, 4)
    assert c[0].tolist()[:3] == [100.0, 90.0, 80.0] and np.isnan(c[0, 3])
    assert c[1].tolist() == [200.0, 185.0, 185.0, 150.0]
    # well 3: A absent makes contact 1 the ground; B's bottom (274) and C's top (270) disagree: mean 272
    assert c[2].tolist() == [300.0, 300.0, 272.0, 250.0]
    assert mismatch[2, 2] == pytest.approx(4.0) and mismatch[0].max() == 0.0


def test_well_contacts_refuses_shapes_that_disagree():
    with pytest.raises(ParameterError, match="bottom has shape"):
        layering.well_contacts([1.0], [[1.0, 2.0]], [[1.0]], [[True, True]], [[1, 1]])


# -- surfaces ---------------------------------------------------------------------------------------------------
def test_interpolated_surface_is_exact_at_wells_and_reproduces_a_plane():
    """Exact at the data (IDW of residuals returns the datum at a data point); a plane is reproduced everywhere
    (least-squares fit of an exact plane, residuals zero): analytic."""
    rng = np.random.default_rng(3)
    xy = rng.uniform(0, 1000, (40, 2))
    plane = 500.0 - 0.02 * xy[:, 0] + 0.013 * xy[:, 1]
    z = plane + rng.normal(0, 3, 40)
    est = layering.interpolate_surface(xy, z, xy)
    assert np.abs(est - z).max() < 1e-9
    pts = rng.uniform(xy.min(axis=0), xy.max(axis=0), (500, 2))  # inside the data's bounding box
    flat = layering.interpolate_surface(xy, plane, pts)
    assert np.allclose(flat, 500.0 - 0.02 * pts[:, 0] + 0.013 * pts[:, 1], atol=1e-9)
    # beyond the data's bounding box the plane is held at its edge value: no run-away extrapolation
    far = layering.interpolate_surface(xy, plane, np.array([[xy[:, 0].max() + 5000.0, xy[:, 1].min()]]))
    edge = 500.0 - 0.02 * xy[:, 0].max() + 0.013 * xy[:, 1].min()
    assert far[0] == pytest.approx(edge, abs=1e-9)
    # no data: all NaN; one or two points: plain IDW (a constant from one point)
    assert np.isnan(layering.interpolate_surface(xy, np.full(40, NAN), pts)).all()
    assert np.allclose(layering.interpolate_surface(xy[:1], [7.0], pts), 7.0)


def test_order_contacts_moves_up_only_and_pinches_outside_the_extent():
    raw = np.array([[10.0, 10.0, 10.0], [8.0, 11.0, 8.0], [5.0, 5.0, 9.0]])
    inside = np.array([[True, True, True], [True, True, False]])
    out = layering.order_contacts(raw, inside)
    assert out[0].tolist() == [10.0, 10.0, 10.0]
    assert out[1].tolist() == [8.0, 10.0, 8.0]  # above the ground at cell 2: moved up to it
    assert out[2].tolist() == [5.0, 5.0, 8.0]  # outside unit 1's extent its bottom is its top
    # a contact no well gives stays NaN and the next is compared with the last known one
    gap = layering.order_contacts(np.array([[10.0], [NAN], [12.0]]))
    assert np.isnan(gap[1, 0]) and gap[2, 0] == 10.0


# -- layers -------------------------------------------------------------------------------------------------------
def _three_units():
    """Contacts of units A, B, C over a 2 x 4 grid: B is absent in the west half and 0.5 thick at one cell."""
    ground = np.array([[100.0, 101.0, 102.0, 103.0], [99.0, 100.0, 101.0, 102.0]])
    a_bot = ground - 20.0
    b_bot = a_bot - np.array([[6.0, 6.0, 6.0, 0.5], [6.0, 6.0, 6.0, 6.0]])
    c_bot = b_bot - 30.0
    raw = np.stack([ground, a_bot, b_bot, c_bot])
    inside = np.ones((3, 2, 4), bool)
    inside[1, :, :2] = False  # B absent in the west
    return raw, inside


def test_absent_unit_is_pass_through_and_the_layer_below_does_not_move():
    """idomain -1 where B is absent or thinner than the minimum; B keeps its true (zero or small) thickness;
    C's bottom is its own contact, the same whether B is there or not."""
    raw, inside = _three_units()
    contacts = layering.order_contacts(raw, inside)
    groups, merged, above, below = layering.layer_groups(3, [(0, 0), (1, 1), (2, 2)])
    top, botm, idomain, emptied = layering.layer_geometry(contacts, groups, min_thickness=1.0)
    assert emptied == 0 and merged == [[], [], []] and above == [] and below == []
    assert (idomain[1, :, :2] == -1).all() and idomain[1, 0, 3] == -1
    assert (idomain[1, :, 2] == 1).all() and idomain[1, 1, 3] == 1
    assert (idomain[0] == 1).all() and (idomain[2] == 1).all()
    assert np.array_equal(botm[1, :, :2], botm[0, :, :2])  # zero thickness where absent
    assert botm[0, 0, 3] - botm[1, 0, 3] == pytest.approx(0.5)  # thin: true thickness, not raised to 1
    # the layer below: its bottom is C's own contact, identical to a run where B is everywhere
    everywhere = layering.order_contacts(raw, np.ones_like(inside))
    _, botm_all, _, _ = layering.layer_geometry(everywhere, groups, min_thickness=1.0)
    assert np.array_equal(botm[2], botm_all[2]) and np.array_equal(botm[0], botm_all[0])
    # the pass-through cells keep the stack in order: no bottom above the top of its layer
    upper = np.concatenate([top[None], botm[:-1]])
    assert (upper - botm >= 0).all()


def test_subset_layers_keep_true_elevations_and_merge_up_or_down():
    raw, inside = _three_units()
    contacts = layering.order_contacts(raw, inside)
    full = layering.layer_geometry(contacts, layering.layer_groups(3, [(0, 0), (1, 1), (2, 2)])[0],
                                   min_thickness=1.0)
    groups, merged, _, _ = layering.layer_groups(3, [(0, 0), (2, 2)])
    assert groups == [(0, 1), (2, 2)] and merged == [[1], []]
    top, botm, idomain, _ = layering.layer_geometry(contacts, groups, min_thickness=1.0)
    assert np.array_equal(top, full[0])
    assert np.array_equal(botm[0], full[1][1]) and np.array_equal(botm[1], full[1][2])  # A+B, then C
    down, merged_down, _, _ = layering.layer_groups(3, [(0, 0), (2, 2)], merge_down=True)
    assert down == [(0, 0), (1, 2)] and merged_down == [[], [1]]
    _, botm_d, _, _ = layering.layer_geometry(contacts, down, min_thickness=1.0)
    assert np.array_equal(botm_d[0], full[1][0]) and np.array_equal(botm_d[1], full[1][2])
    # B and C only: the model top is B's top (A's bottom), not the ground
    groups_bc, _, above, _ = layering.layer_groups(3, [(1, 1), (2, 2)])
    top_bc, botm_bc, _, _ = layering.layer_geometry(contacts, groups_bc, min_thickness=1.0)
    assert above == [0] and np.array_equal(top_bc, contacts[1]) and np.array_equal(botm_bc, full[1][1:])


def test_layer_groups_refuses_overlap_and_disorder():
    with pytest.raises(ParameterError, match="without overlap"):
        layering.layer_groups(3, [(1, 1), (0, 0)])
    with pytest.raises(ParameterError, match="without overlap"):
        layering.layer_groups(3, [(0, 1), (1, 2)])


def test_domain_and_empty_columns_are_inactive():
    raw = np.array([[[10.0, 10.0]], [[9.5, 5.0]]])
    top, botm, idomain, emptied = layering.layer_geometry(raw, [(0, 0)], min_thickness=1.0,
                                                          active=np.array([[True, True]]))
    assert idomain.tolist() == [[[0, 1]]] and emptied == 1
    _, _, idomain, _ = layering.layer_geometry(raw, [(0, 0)], min_thickness=1.0, active=np.array([[True, False]]))
    assert idomain.tolist() == [[[0, 0]]]
    with pytest.raises(ParameterError, match="min_thickness"):
        layering.layer_geometry(raw, [(0, 0)], min_thickness=0.0)


# -- K ----------------------------------------------------------------------------------------------------------
def test_effective_k_of_a_merged_layer():
    """source: docs check values (VERIFY.md, Statistics): two layers of equal thickness with K = 1 and 100 give
    K_h = 50.5 (arithmetic) and K_v = 1.980 (harmonic)."""
    kh, kv = layering.effective_k(np.array([[2.0, 0.0], [2.0, 0.0]]), np.array([[1.0, 3.0], [100.0, 50.0]]),
                                  np.array([[1.0, 0.3], [100.0, 5.0]]))
    assert kh[0] == pytest.approx(50.5) and kv[0] == pytest.approx(1.980, abs=5e-4)
    assert kh[1] == 3.0 and kv[1] == 0.3  # no thickness at all: the named unit's values


# -- starting heads ------------------------------------------------------------------------------------------------
def test_aquitard_heads_lie_between_the_aquifers_above_and_below():
    """Steady vertical leakage through a uniform layer has a linear head profile (Darcy); the aquifer heads apply
    at the aquitard's top and bottom, so its mid elevation gets their mean. Two layers without heads between
    two aquifers get the values of that line at their mid elevations."""
    top = np.array([[100.0]])
    botm = np.array([[[80.0]], [[70.0]], [[40.0]]])
    own = np.array([[[95.0]], [[999.0]], [[75.0]]])  # the aquitard's own surface is not used between aquifers
    strt, source = layering.starting_heads(own, top, botm, confining=[False, True, False])
    assert strt[:, 0, 0].tolist() == [95.0, 85.0, 75.0]
    assert source[:, 0, 0].tolist() == [layering.STRT_OWN, layering.STRT_BETWEEN, layering.STRT_OWN]
    # four layers: aquifer (head 100, bottom 90), aquitard 90-80, other without heads 80-50, aquifer (head 70)
    # the line runs from 100 at z = 90 to 70 at z = 50: at z = 85 it is 96.25, at z = 65 it is 81.25
    top = np.array([[120.0]])
    botm = np.array([[[90.0]], [[80.0]], [[50.0]], [[0.0]]])
    own = np.array([[[100.0]], [[NAN]], [[NAN]], [[70.0]]])
    strt, source = layering.starting_heads(own, top, botm, confining=[False, True, False, False])
    assert strt[:, 0, 0] == pytest.approx([100.0, 96.25, 81.25, 70.0])
    assert source[1:3, 0, 0].tolist() == [layering.STRT_BETWEEN, layering.STRT_BETWEEN]


def test_heads_on_one_side_or_none():
    top = np.array([[100.0, 100.0]])
    botm = np.array([[[80.0, 80.0]], [[70.0, 70.0]], [[40.0, 40.0]]])
    own = np.array([[[95.0, NAN]], [[88.0, NAN]], [[NAN, NAN]]])
    strt, source = layering.starting_heads(own, top, botm, confining=[False, True, False])
    # cell 0: nothing below the aquitard: its own surface; the lowest layer copies the one above
    assert strt[:, 0, 0].tolist() == [95.0, 88.0, 95.0]
    assert source[:, 0, 0].tolist() == [layering.STRT_OWN, layering.STRT_OWN, layering.STRT_ONE_SIDE]
    # cell 1: no layer has a head: the layer's mean, flagged
    assert strt[:, 0, 1].tolist() == [95.0, 88.0, 95.0] and (source[:, 0, 1] == layering.STRT_MEAN).all()


def test_cell_types():
    top = np.array([[100.0]])
    botm = np.array([[[90.0]], [[80.0]], [[60.0]], [[50.0]], [[10.0]]])
    idomain = np.ones((5, 1, 1), int)
    strt = np.array([[[95.0]], [[92.0]], [[85.0]], [[75.0]], [[40.0]]])
    types, why = layering.cell_types(["other", "aquifer", "aquifer", "aquitard", "aquifer"], strt, top, botm,
                                     idomain)
    # other above the first aquifer: 1; first aquifer: 1; a saturated aquifer below it: 0; aquitard: 0; the
    # lowest aquifer has its head (40) below its top (50): 1
    assert types.tolist() == [1, 1, 0, 0, 1]
    assert why[3].startswith("confined: aquitard") and "below its top" in why[4]


# -- the value object ---------------------------------------------------------------------------------------------
def _layers(**change):
    nrow, ncol = 2, 3
    args = dict(units=["A", "B"], roles=["aquifer", "aquitard"], top=np.full((nrow, ncol), 100.0),
                botm=np.stack([np.full((nrow, ncol), 80.0), np.full((nrow, ncol), 70.0)]),
                idomain=np.ones((2, nrow, ncol), int), k=np.ones((2, nrow, ncol)), k33=np.full((2, nrow, ncol), 0.1),
                strt=np.full((2, nrow, ncol), 90.0), icelltype=[1, 0], length_unit="ft", k_unit="ft/d",
                x0=0.0, y0=0.0, cell=10.0, nrow=nrow, ncol=ncol, crs=None)
    args.update(change)
    return ModelLayers(**args)


def test_model_layers_checks_itself():
    m = _layers()
    assert m.nlay == 2 and m.thickness.shape == (2, 2, 3) and np.allclose(m.thickness[1], 10.0)
    assert m.time_unit == "days" and m.merged == {} and m.notes == []
    x, y = m.cell_centres()
    assert x[0].tolist() == [5.0, 15.0, 25.0] and y[:, 0].tolist() == [15.0, 5.0]
    with pytest.raises(AttributeError):
        m.cell = 5.0  # frozen
    flat = np.stack([np.full((2, 3), 80.0), np.full((2, 3), 80.0)])
    cases = [(dict(idomain=np.full((2, 2, 3), 2)), "idomain"),
             (dict(botm=flat), "zero or negative thickness"),
             (dict(k_unit="m/d"), "k_unit"),
             (dict(length_unit="km", k_unit="km/d"), "length_unit"),
             (dict(top=np.ones((3, 3))), "top has shape"),
             (dict(roles=["aquifer"]), "roles"),
             (dict(k=np.zeros((2, 2, 3))), "k must be"),
             (dict(strt=np.full((2, 2, 3), NAN)), "strt"),
             (dict(icelltype=[1, 2]), "icelltype"),
             (dict(merged={"X": ["B"]}), "merged"),
             (dict(cell=0.0), "cell")]
    for change, message in cases:
        with pytest.raises(ParameterError, match=message):
            _layers(**change)
    # a pass-through cell may have zero thickness; an inactive cell anything
    idomain = np.ones((2, 2, 3), int)
    idomain[1] = -1
    assert _layers(botm=flat, idomain=idomain).idomain[1].min() == -1
