"""Every option of every command is shown to have an effect by a test named here; a new option without one fails.

The table maps (command, option) to the test that passes the option and checks what it changes. The check below
also reads that test's source (with its decorators) and requires the option's text in it, so an entry cannot point
at a test that never uses its option.
"""

import argparse
import ast
from pathlib import Path

from rig.cli import build_parser

TESTS = Path(__file__).resolve().parent

EFFECT_TESTS = {
    ("lut", "--temperature-c"): "test_temperature_tables_from_runs_at_25_and_35_c",
    ("lut", "--clearing-c"): "test_temperature_tables_from_runs_at_25_and_35_c",
    ("map", "--full"): "test_full_tolerance_and_max_levels_set_the_sweep_of_each_command",
    ("map", "--max-levels"): "test_full_tolerance_and_max_levels_set_the_sweep_of_each_command",
    ("map", "--tolerance-mrad"): "test_full_tolerance_and_max_levels_set_the_sweep_of_each_command",
    ("run", "--full"): "test_full_tolerance_and_max_levels_set_the_sweep_of_each_command",
    ("run", "--max-levels"): "test_full_tolerance_and_max_levels_set_the_sweep_of_each_command",
    ("run", "--tolerance-mrad"): "test_full_tolerance_and_max_levels_set_the_sweep_of_each_command",
    ("sweep", "--full"): "test_full_tolerance_and_max_levels_set_the_sweep_of_each_command",
    ("map", "--adaptive"): "test_map_with_adaptive_tiles",
    ("run", "--adaptive"): "test_adaptive_run_on_the_demo_bench",
    ("run", "--from"): "test_recalibration_at_a_new_wavelength",
    ("sweep", "--adaptive"): "test_camera_dying_mid_adaptive_sweep_resumes_to_the_same_levels",
    ("sweep", "--max-levels"): "test_camera_dying_mid_adaptive_sweep_resumes_to_the_same_levels",
    ("sweep", "--tolerance-mrad"): "test_camera_dying_mid_adaptive_sweep_resumes_to_the_same_levels",
    ("align", "--terminal"): "test_align_command_without_a_terminal_runs_for_its_seconds",
    ("cameras", "--config"): "test_genicam_cameras_command_lists_cameras_and_the_configured_ones_settings",
    ("cameras", "--simulated"): "test_genicam_cameras_command_lists_cameras_and_the_configured_ones_settings",
    ("", "--version"): "test_version",
    ("", "--debug"): "test_an_internal_error_is_one_line_with_a_log_and_marks_the_run_failed",
    ("analyze", "--force"): "test_force_writes_over_results_of_another_source",
    ("lut", "--force"): "test_force_writes_over_results_of_another_source",
    ("predict", "--force"): "test_force_writes_over_results_of_another_source",
    ("align", "--config"): "test_align_shows_the_mirror_gray_and_scans_the_waveplate",
    ("align", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("align", "--mirror-gray"): "test_align_shows_the_mirror_gray_and_scans_the_waveplate",
    ("align", "--rate"): "test_align_command_without_a_terminal_runs_for_its_seconds",
    ("align", "--scan-waveplate"): "test_align_shows_the_mirror_gray_and_scans_the_waveplate",
    ("align", "--seconds"): "test_align_command_without_a_terminal_runs_for_its_seconds",
    ("align", "--sim"): "test_align_command_without_a_terminal_runs_for_its_seconds",
    ("analyze", "--bit-depth"): "test_analyze_reference_gray_sign_and_bit_depth",
    ("analyze", "--dark-adu"): "test_simulated_folder_end_to_end",
    ("analyze", "--direction"): "test_direction_sets_which_way_the_curve_runs",
    ("analyze", "--json"): "test_simulated_folder_end_to_end",
    ("analyze", "--method"): "test_methods_agree_and_user_roi_is_used",
    ("analyze", "--name-pattern"): "test_names_carry_the_gray",
    ("analyze", "--out"): "test_simulated_folder_end_to_end",
    ("analyze", "--reference-gray"): "test_analyze_reference_gray_sign_and_bit_depth",
    ("analyze", "--roi"): "test_methods_agree_and_user_roi_is_used",
    ("analyze", "--sign"): "test_analyze_reference_gray_sign_and_bit_depth",
    ("analyze", "--smooth"): "test_simulated_folder_end_to_end",
    ("compare", "--out"): "test_predict_a_third_wavelength_of_the_simulated_panel",
    ("flicker", "--config"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("flicker", "--events"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("flicker", "--expect-hz"): "test_flicker_warns_when_the_expected_drive_is_beyond_the_frame_rate",
    ("flicker", "--gray"): "test_flicker_command_recovers_the_simulated_ripple",
    ("flicker", "--json"): "test_flicker_command_recovers_the_simulated_ripple",
    ("flicker", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("flicker", "--method"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("flicker", "--no-frames"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("flicker", "--out"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("flicker", "--seconds"): "test_flicker_command_recovers_the_simulated_ripple",
    ("flicker", "--sim"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("lut", "--bit-depth"): "test_lut_bit_depth_sets_the_entries",
    ("lut", "--config"): "test_a_finished_sweep_says_what_the_table_spans_and_what_to_do_next",
    ("lut", "--levels"): "test_lut_levels_and_range_options",
    ("lut", "--out"): "test_lut_writes_five_files_and_reports_its_errors",
    ("lut", "--range"): "test_lut_levels_and_range_options",
    ("lut", "--wavelength-nm"): "test_lut_writes_five_files_and_reports_its_errors",
    ("map", "--background-gray"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("map", "--config"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("map", "--events"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("map", "--grid"): "test_map_recovers_each_tiles_range",
    ("map", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("map", "--method"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("map", "--no-frames"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("map", "--out"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("map", "--resume"): "test_map_resumes_after_the_camera_fails",
    ("map", "--sim"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("new-bench", "--bit-depth"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--camera"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--copy"): "test_copy_writes_a_shipped_config_as_it_is",
    ("new-bench", "--device"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--out"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--panel-px"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--pitch-um"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--power-meter"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--rotator"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--shutter"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--thermometer"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("new-bench", "--wavelength-nm"): "test_flags_answer_the_questions_and_the_end_of_input_keeps_placeholders",
    ("pattern", "--angle-deg"): "test_pattern_takes_the_panel_from_config_and_turns_with_angle",
    ("pattern", "--charge"): "test_patterns_through_the_table_use_its_grays",
    ("pattern", "--config"): "test_pattern_takes_the_panel_from_config_and_turns_with_angle",
    ("pattern", "--focal-mm"): "test_patterns_through_the_table_use_its_grays",
    ("pattern", "--kind"): "test_patterns_through_the_table_use_its_grays",
    ("pattern", "--lut"): "test_patterns_through_the_table_use_its_grays",
    ("pattern", "--mirror-phase"): "test_patterns_through_the_table_use_its_grays",
    ("pattern", "--out"): "test_patterns_through_the_table_use_its_grays",
    ("pattern", "--period-px"): "test_patterns_through_the_table_use_its_grays",
    ("plan", "--beam-radius-mm"): "test_plan_flags_override_the_config",
    ("plan", "--camera-pixel-um"): "test_plan_flags_override_the_config",
    ("plan", "--config"): "test_plan_uses_the_config_it_is_given",
    ("plan", "--distance-mm"): "test_plan_command_prints_json_with_the_documented_keys",
    ("plan", "--json"): "test_plan_command_prints_json_with_the_documented_keys",
    ("plan", "--period-px"): "test_plan_command_prints_json_with_the_documented_keys",
    ("plan", "--pitch-um"): "test_plan_flags_override_the_config",
    ("plan", "--wavelength-nm"): "test_plan_flags_override_the_config",
    ("predict", "--from"): "test_predict_a_third_wavelength_of_the_simulated_panel",
    ("predict", "--out"): "test_predict_a_third_wavelength_of_the_simulated_panel",
    ("predict", "--wavelength-nm"): "test_predict_a_third_wavelength_of_the_simulated_panel",
    ("preflight", "--config"): "test_preflight_command_on_the_two_monitor_display_reports_every_item",
    ("preview", "--config"): "test_preview_on_the_panel_window_writes_the_cameras_frame",
    ("preview", "--laser-safety-acknowledged"):
        "test_preview_with_a_live_camera_asks_for_the_laser_safety_acknowledgement",
    ("preview", "--mirror-gray"): "test_preview_on_the_panel_window_writes_the_cameras_frame",
    ("preview", "--out"): "test_preview_writes_a_16_bit_frame_with_fringes_in_a_band",
    ("preview", "--sim"): "test_preview_writes_a_16_bit_frame_with_fringes_in_a_band",
    ("preview", "--view"): "test_preview_writes_a_16_bit_frame_with_fringes_in_a_band",
    ("run", "--config"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("run", "--events"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("run", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("run", "--method"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("run", "--no-frames"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("run", "--out"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("run", "--sim"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("run", "--warmup-minutes"): "test_sweep_waits_for_a_warming_panel",
    ("screens", "--allow-primary"): "test_screens_check_refuses_the_primary_unless_allowed",
    ("screens", "--check"): "test_screens_check_reads_every_pixel_back",
    ("screens", "--config"): "test_screens_check_with_a_config_of_another_size_fails_cleanly",
    ("screens", "--hold-s"): "test_screens_check_reads_every_pixel_back",
    ("sim-truth", "--config"): "test_sim_truth_is_the_configured_benchs",
    ("sim-truth", "--out"): "test_sim_truth_matches_the_bench",
    ("sweep", "--config"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("sweep", "--events"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("sweep", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("sweep", "--method"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("sweep", "--no-frames"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("sweep", "--out"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("sweep", "--pair"): "test_tune_saves_the_pair_and_the_printed_sweep_uses_it",
    ("sweep", "--resume"): "test_killed_sweep_resumed_five_times_equals_an_uninterrupted_one",
    ("sweep", "--sim"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("sweep", "--warmup-minutes"): "test_sweep_waits_for_a_warming_panel",
    ("timing", "--config"): "test_timing_recovers_the_simulated_latency",
    ("timing", "--cycles"): "test_timing_recovers_the_simulated_latency",
    ("timing", "--hold-s"): "test_timing_watches_each_switch_for_hold_s",
    ("timing", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("timing", "--sim"): "test_timing_recovers_the_simulated_latency",
    ("tune", "--config"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("tune", "--events"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("tune", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("tune", "--method"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("tune", "--no-frames"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("tune", "--out"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("tune", "--sim"): "test_run_folder_options_reach_every_command_that_makes_one",
    ("verify", "--config"): "test_verify_on_the_simulator_shows_the_tables_improvement",
    ("verify", "--frames"): "test_verify_on_the_simulator_shows_the_tables_improvement",
    ("verify", "--laser-safety-acknowledged"): "test_live_commands_ask_for_and_store_the_laser_safety_flag",
    ("verify", "--lut"): "test_verify_on_the_simulator_shows_the_tables_improvement",
    ("verify", "--periods"): "test_verify_on_the_simulator_shows_the_tables_improvement",
    ("verify", "--sim"): "test_verify_on_the_simulator_shows_the_tables_improvement",
    ("verify", "--targets"): "test_verify_on_the_simulator_shows_the_tables_improvement",
}


# Options merged from the adaptive-sweep branch at the end of this session with no test yet that shows their effect
# on these commands (only refusals of bad values): owed, and listed so that any other new option still fails.
UNTESTED: set[tuple[str, str]] = set()


def parser_options() -> set[tuple[str, str]]:
    """(command, long option) for every option of every subcommand, and ('', option) for the program's own."""
    parser = build_parser()
    found = set()

    def options(p, command):
        for action in p._actions:
            if isinstance(action, argparse._SubParsersAction):
                for name, sub in action.choices.items():
                    options(sub, name)
            elif action.option_strings and not isinstance(action, argparse._HelpAction):
                found.add((command, max(action.option_strings, key=len)))

    options(parser, "")
    return found


def functions_of_tests() -> dict[str, str]:
    """Name -> source (decorators included) of every test function in tests/."""
    functions = {}
    for path in sorted(TESTS.glob("test_*.py")):
        source = path.read_text(encoding="utf-8")
        for node in ast.parse(source).body:
            if isinstance(node, ast.FunctionDef) and node.name.startswith("test_"):
                parts = [ast.get_source_segment(source, d) for d in node.decorator_list]
                functions[node.name] = "\n".join(parts + [ast.get_source_segment(source, node)])
    return functions


def test_every_option_of_every_command_has_an_effect_test():
    offered = parser_options()
    assert sorted(offered - EFFECT_TESTS.keys() - UNTESTED) == [], "options without a test showing their effect"
    assert UNTESTED <= offered and not UNTESTED & EFFECT_TESTS.keys()
    assert sorted(EFFECT_TESTS.keys() - offered) == [], "the table names options no command offers any more"


def test_the_method_help_has_a_note_for_every_estimator():
    from analysis.fringe import METHOD_NOTES, METHODS
    assert set(METHOD_NOTES) == set(METHODS)
    method_help = next(a.help for a in build_parser()._subparsers._group_actions[0].choices["run"]._actions
                       if "--method" in a.option_strings)
    assert all(f"{name}" in method_help for name in METHODS) and "(default)" in method_help


def test_each_named_test_exists_and_passes_its_option():
    functions = functions_of_tests()
    missing = {key: name for key, name in EFFECT_TESTS.items() if name not in functions}
    assert missing == {}
    unused = {key: name for key, name in EFFECT_TESTS.items() if key[1] not in functions[name]}
    assert unused == {}
