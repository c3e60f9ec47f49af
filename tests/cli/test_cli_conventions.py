"""Command-line conventions shared by every command: no abbreviated flags, a suggestion for an unknown flag, errors
as one JSON object with --json, and library key paths translated into flags."""

import json

import pytest


@pytest.mark.parametrize("argv, flag, hint", [
    (["thresholds", "--firm", "3", "--cost", "1"], "--firm", "--firms"),
    (["thresholds", "--firms", "3", "--cost", "1", "--delt", "0.5"], "--delt", "--delta"),
    (["run", "--worker", "2", "x.toml"], "--worker", "--workers"),
])
def test_abbreviated_and_unknown_flags_are_refused_with_the_closest_flag(cli, argv, flag, hint):
    r = cli(*argv)
    assert r.code == 2 and r.out == ""
    assert r.err.strip() == f"supergame {argv[0]}: error: {flag}: unknown flag; did you mean {hint}?"


def test_with_json_an_error_is_one_json_object(cli):
    r = cli("thresholds", "--firms", "3", "--cost", "1,2", "--json")
    assert r.code == 2 and r.err == ""
    doc = json.loads(r.out)
    assert doc == {"error": {"key": "--cost", "message": doc["error"]["message"], "kind": "input"}}
    assert "one value per firm" in doc["error"]["message"]
    r = cli("thresholds", "--firms", "3", "--cost", "1", "--demand", "nope", "--json")
    assert r.code == 2 and json.loads(r.out)["error"]["key"] == "--demand"


def test_library_keys_become_flags_on_the_command_line(cli, tmp_path):
    from sim.cli import flag_of

    assert flag_of("out") == "--out" and flag_of("plugins[2]") == "--plugin[2]" and flag_of("market.cost") == \
        "market.cost"
    r = cli("verify", tmp_path / "nowhere")
    assert r.code == 2 and r.err.startswith("supergame verify: error: RUN_DIR:")
