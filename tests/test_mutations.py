"""Mutation check: the suite notices a changed threshold, table entry, comparison or sign.

Each case changes one thing in a kernel — a default threshold, one entry of a published
table, a strict comparison, a sign — for the duration of the test only (the function or
class is recompiled from its own source with the change and patched wherever it is
referenced; the files are never touched), then runs an existing physics test, which
must now fail. A case whose test still passes shows a check that cannot see the
mistake it is there for.
"""

from __future__ import annotations

import inspect
import sys
import textwrap

import pytest
import test_building
import test_geometry_results
import test_lighting
import test_metrics
import test_sky
import test_space_results

from luxsweep.kernels import lighting, metrics, raytrace, sky, view


def mutate(monkeypatch: pytest.MonkeyPatch, module, name: str, old: str, new: str) -> None:
    """Replace ``old`` by ``new`` (exactly once) in the source of ``module.name``."""
    original = getattr(module, name)
    source = textwrap.dedent(inspect.getsource(original))
    assert source.count(old) == 1, f"'{old}' must occur once in {name}"
    code = compile(source.replace(old, new), inspect.getsourcefile(original), "exec")
    namespace: dict = {}
    exec(code, module.__dict__, namespace)  # globals stay the module's own
    mutant = namespace[name]
    for loaded in list(sys.modules.values()):
        for attr, value in list(getattr(loaded, "__dict__", {}).items()):
            if value is original:
                monkeypatch.setattr(loaded, attr, mutant)


def test_unmutated_targets_pass():
    # the targets pass as they are; each case below must turn one of them into a failure
    test_metrics.test_lm83_ase_more_than_250_hours()
    test_sky.test_cie_sky_parameters_equal_the_iso15469_table(12)
    test_sky.test_cie_standard_sky_against_iso15469_formula(12)
    test_sky.test_cie_overcast_illuminance_over_patches()


def test_a_changed_threshold_is_noticed(monkeypatch):
    # IES LM-83-12: ASE counts more than 250 h; a 249 h default must fail the hand count
    mutate(monkeypatch, metrics, "MetricParams", "ase_hours_limit: float = 250.0",
           "ase_hours_limit: float = 249.0")
    # test_metrics builds its default parameters on import: rebuild them from the mutant
    assert test_metrics.run.__defaults__ == (None, None, test_metrics.P, None)
    params = metrics.MetricParams()
    assert params.ase_hours_limit == 249.0
    monkeypatch.setattr(test_metrics, "P", params)
    monkeypatch.setattr(test_metrics.run, "__defaults__", (None, None, params, None))
    with pytest.raises(AssertionError):
        test_metrics.test_lm83_ase_more_than_250_hours()


def test_a_changed_comparison_is_noticed(monkeypatch):
    # "more than 250 hours" is strict (IES LM-83-12); >= must fail the hand count
    mutate(monkeypatch, metrics, "finalize", ") > (", ") >= (")
    with pytest.raises(AssertionError):
        test_metrics.test_lm83_ase_more_than_250_hours()


def test_a_changed_table_entry_is_noticed(monkeypatch):
    # ISO 15469 indicatrix group 4 has c = 10 (sky types 8, 11 and 12)
    monkeypatch.setitem(sky.CIE_INDICATRIX, 4, (11.0, -3.0, 0.45))
    with pytest.raises(AssertionError):
        test_sky.test_cie_sky_parameters_equal_the_iso15469_table(12)
    with pytest.raises(AssertionError):
        test_sky.test_cie_standard_sky_against_iso15469_formula(12)


def test_a_changed_sign_is_noticed(monkeypatch):
    # the CIE overcast sky brightens towards the zenith: L/Lz = (1 + 2 sin α) / 3
    mutate(monkeypatch, sky, "luminance_cie_overcast", "(1.0 + 2.0 *", "(1.0 - 2.0 *")
    with pytest.raises(AssertionError):
        test_sky.test_cie_overcast_illuminance_over_patches()


def test_a_lost_twin_mapping_is_noticed(monkeypatch):
    # a back-face hit turned onto the twin must swap the barycentric coordinates (the twin's
    # corners are in reverse order), else the hit point leaves the seam plane
    mutate(monkeypatch, raytrace, "Scene", "u[back], v[back] = v[back], u[back].copy()",
           "pass")
    with pytest.raises(AssertionError):
        test_building.test_zero_gap_twins_face_the_ray()


def test_an_ignored_internal_pane_is_noticed(monkeypatch):
    # light through an internal opening scales with its transmittance (superposition)
    mutate(monkeypatch, raytrace, "Scene", "factor[idx[~out]] *= self._internal_factor",
           "factor[idx[~out]] *= 0 * self._internal_factor")
    with pytest.raises(AssertionError):
        test_building.test_borrowed_light_is_linear_in_transmittance(0.0)


def test_a_shading_group_of_the_whole_building_is_noticed(monkeypatch):
    # each space is its own LM-83 shading group: counting the sunlit share over every sensor
    # of the building must fail the space-alone comparison
    mutate(monkeypatch, metrics, "_Fold", "return (_share_more_than(n_sunlit, self.space_size,",
           "return (_share_more_than(n_sunlit, self.n_sensors,")
    with pytest.raises(AssertionError):
        test_space_results.test_each_space_is_its_own_grid("runs", False)


def test_an_area_weighted_building_sda_is_noticed(monkeypatch):
    # IES LM-83-12 pools the analysis area: weighting the spaces' sDA by area must fail
    mutate(monkeypatch, metrics, "finalize", 'out["sda"] = 100.0 * np.mean(sda_ok, axis=-1)',
           'out["sda"] = area_weighted(spaces["sda"], area)')
    with pytest.raises(AssertionError):
        test_space_results.test_building_hand_example_pooled_weighted_lowest()


def test_a_changed_share_of_view_positions_is_noticed(monkeypatch):
    # a space's view value is met from 3/4 of its positions; taking the next position down
    # (met from 8 of 9) must fail the hand count
    test_geometry_results.test_space_value_is_met_from_three_quarters_of_its_positions()
    mutate(monkeypatch, view, "_met_by_share", "- 1e-9)) - 1]", "- 1e-9))]")
    with pytest.raises((AssertionError, IndexError)):
        test_geometry_results.test_space_value_is_met_from_three_quarters_of_its_positions()


def test_a_non_strict_shading_rule_for_lighting_is_noticed(monkeypatch):
    # IES LM-83-12 closes the shading when *more than* 2 % of the sensors are sunlit: closing
    # at exactly 2 % (one of 50) must fail the hand case of the lighting's shading rule
    mutate(monkeypatch, metrics, "shading_closed",
           "return _share_more_than(n_sunlit, size, sensor_fraction)",
           "return n_sunlit * 50 >= size")
    with pytest.raises(AssertionError):
        test_lighting.test_shading_rule_matches_the_sda_counts()


def test_a_dimmer_that_switches_off_is_noticed(monkeypatch):
    # continuous dimming keeps its minimum power in bright daylight (the ballast stays on,
    # common practice): dropping to zero must fail the all-bright hand case
    mutate(monkeypatch, lighting, "power_fraction", "fraction = np.where(needed <= min_light, "
           "min_power, ramp)", "fraction = np.where(needed <= min_light, 0.0, ramp)")
    with pytest.raises(AssertionError):
        test_lighting.test_all_bright_and_all_dark("dimming", 0.1, 1.0)


def test_a_shading_state_outside_the_analysis_hours_is_noticed(monkeypatch):
    # IES LM-83-12 closes shading in analysis hours only; the state the views read must
    # equal the sDA count's, so a rule that also closes outside them must fail
    import test_glare_views

    mutate(monkeypatch, metrics, "lm83_closed", "& np.asarray(analysis, dtype=bool))", ")")
    with pytest.raises(AssertionError):
        test_glare_views.test_lm83_closed_is_the_state_the_sda_count_uses(3)


def test_a_shading_group_of_the_whole_grid_at_the_views_is_noticed(monkeypatch):
    # one shading group per space (as the sDA count): pooling every sensor must fail
    import test_glare_views

    mutate(monkeypatch, metrics, "shading_closed",
           "size = np.bincount(own, minlength=n_sp).astype(np.int64)[:, None]",
           "size = np.int64(own.size)")
    with pytest.raises(AssertionError):
        test_glare_views.test_lm83_closed_is_the_state_the_sda_count_uses(3)
