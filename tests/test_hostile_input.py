"""Hostile and careless input gets one line naming the culprit, never a traceback or a crash.

Sources of what counts as wrong:

* physical consistency of a rigid body: m > 0 and the principal moments of inertia obey the triangle
  inequality I1 + I2 >= I3 (Traversaro, Brossette, Escande & Nori 2016, IROS, eq. 6; a textbook property of
  any mass distribution);
* inertias of bodies on one joint add after a change of frame (parallel-axis theorem: Featherstone,
  *Rigid Body Dynamics Algorithms*, 2008, eq. 2.63);
* XML 1.0 (W3C Recommendation, section 4.2): an entity declared in a DTD is replaced by its text; a reader
  that does not process the DTD reads something else, hence the refusal;
* the limits themselves (links, mass, offsets, durations, delays, substeps) are project choices, documented
  where they are defined ("common practice").

Anything that could crash the interpreter (a very deep URDF chain) runs in a subprocess only.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from models.arm import MAX_LINK_MASS_KG, MAX_URDF_LINKS, load_arm
from models.errors import ModelError, ParameterError, SandboxError
from models.exo import ExoParams, exo_urdf
from sim.cli import main
from sim.loop.scenario import MAX_DURATION_S, MAX_SENSOR_DELAY_S, MAX_SUBSTEPS, MAX_TICKS, load_scenario
from sim.physics.sensors import MAX_DELAY_TICKS, ForceSensorParams

ROOT = Path(__file__).resolve().parents[1]


def _link(name, mass="1.0", ixx="0.01", iyy="0.01", izz="0.01", com="0 0 0.1", rpy="0 0 0"):
    return (f'<link name="{name}"><inertial><origin xyz="{com}" rpy="{rpy}"/><mass value="{mass}"/>'
            f'<inertia ixx="{ixx}" ixy="0" ixz="0" iyy="{iyy}" iyz="0" izz="{izz}"/></inertial></link>')


def _joint(name, parent, child, kind="revolute", xyz="0 0 0.1", axis="0 1 0"):
    limit = '<limit lower="-1" upper="1" effort="10" velocity="2"/>' if kind != "fixed" else ""
    return (f'<joint name="{name}" type="{kind}"><parent link="{parent}"/><child link="{child}"/>'
            f'<origin xyz="{xyz}"/><axis xyz="{axis}"/>{limit}</joint>')


def _robot(*parts, prolog=""):
    return prolog + '<robot name="r"><link name="base"/>' + "".join(parts) + "</robot>"


def _chain(n):
    return _robot(*(_link(f"l{i}") + _joint(f"j{i}", "base" if i == 0 else f"l{i - 1}", f"l{i}") for i in range(n)))


def _one_line_error(capsys, argv):
    rc = main(argv)
    err = capsys.readouterr().err
    assert rc != 0
    lines = [ln for ln in err.splitlines() if ln.startswith("exosandbox")]
    assert len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


# -- URDF --------------------------------------------------------------------------------------
def test_an_entity_declaration_is_refused_not_read_as_zero(tmp_path, capsys):
    # XML 1.0 section 4.2: Python's parser expands &I; to 0.02, pinocchio's reader takes it as no number (0)
    text = _robot(_link("l1", ixx="&I;") + _joint("j1", "base", "l1"),
                  prolog='<?xml version="1.0"?>\n<!DOCTYPE robot [<!ENTITY I "0.02">]>\n')
    f = tmp_path / "entity.urdf"
    f.write_text(text)
    line = _one_line_error(capsys, ["check", str(f)])
    assert "DOCTYPE" in line and "entit" in line
    with pytest.raises(ModelError, match="DOCTYPE"):
        load_arm(text)


def test_billion_laughs_is_refused_in_one_line():
    decl = '<!ENTITY a "aaaaaaaaaa">' + "".join(
        f'<!ENTITY {b} "{("&" + a + ";") * 10}">' for a, b in zip("abcdef", "bcdefg"))
    text = f'<?xml version="1.0"?>\n<!DOCTYPE robot [{decl}]><robot name="&g;"><link name="base"/></robot>'
    with pytest.raises(ModelError, match="DOCTYPE"):
        load_arm(text)


@pytest.mark.parametrize("value", ["0.01_5", " 0.015 ", "\uff10.015"])
def test_a_value_python_reads_but_pinocchio_does_not_is_caught_by_the_per_link_comparison(value):
    # float("0.01_5") == 0.015 in Python; pinocchio's reader builds 0 for it
    with pytest.raises(ModelError, match=r"links \['l1'\] on joint 'j1': pinocchio built inertia"):
        load_arm(_robot(_link("l1", ixx=value) + _joint("j1", "base", "l1")))
    with pytest.raises(ModelError, match=r"pinocchio built mass"):
        load_arm(_robot(_link("l1", mass=value.replace("0.01", "1")) + _joint("j1", "base", "l1")))


def test_each_link_as_built_matches_the_file_including_links_lumped_through_fixed_joints():
    # parallel-axis theorem (Featherstone 2008, eq. 2.63): l1 and its fixed child l2 sum on j1; a rotated
    # inertial (rpy) is turned into the link frame first.  Loading succeeds only if every joint's mass, centre
    # of mass and inertia agree with the sum of the file's links.
    text = _robot(_link("l1", ixx="0.02", iyy="0.015", izz="0.01", rpy="0.3 -0.2 0.1")
                  + _joint("j1", "base", "l1")
                  + _link("l2", mass="0.5", com="0.05 0 0") + _joint("f", "l1", "l2", kind="fixed", xyz="0.1 0.2 0"))
    arm = load_arm(text)
    assert arm.model.inertias[1].mass == pytest.approx(1.5, rel=1e-12)
    # the built-in exoskeleton passes the same comparison
    load_arm(exo_urdf(ExoParams()))


@pytest.mark.parametrize(("parts", "match"), [
    ((_link("l1", mass="1e300") + _joint("j1", "base", "l1"),), rf"mass must be at most {MAX_LINK_MASS_KG:g} kg"),
    ((_link("l1", mass="-1") + _joint("j1", "base", "l1"),), "mass must be > 0 kg"),
    ((_link("l1", mass="nan") + _joint("j1", "base", "l1"),), "not finite"),
    ((_link("l1", ixx="inf") + _joint("j1", "base", "l1"),), "not finite"),
    ((_link("l1", ixx="-0.01") + _joint("j1", "base", "l1"),), "positive definite"),
    # triangle inequality of principal moments (Traversaro et al. 2016, eq. 6): 0.05 > 0.01 + 0.01
    ((_link("l1", ixx="0.05") + _joint("j1", "base", "l1"),), "triangle inequality"),
    ((_link("l1", ixx="1e6", iyy="1e6", izz="1e6") + _joint("j1", "base", "l1"),), "at most 1000 kg m"),
    ((_link("l1") + _joint("j1", "base", "l1", xyz="0 0 1e9"),), r"within \+-10 m"),
    ((_link("l1"),), "no movable joint"),
    ((_link("l1") + _joint("f", "base", "l1", kind="fixed"),), "no movable joint"),
    ((_link("l1") + _joint("j1", "base", "l1") + _link("l2") + _joint("j2", "base", "l2"),), "branching tree"),
])
def test_absurd_or_degenerate_urdf_gets_a_verdict_naming_it(parts, match):
    with pytest.raises(ModelError, match=match):
        load_arm(_robot(*parts))


def test_a_chain_longer_than_the_limit_is_refused_before_building():
    with pytest.raises(ModelError, match=rf"at most {MAX_URDF_LINKS} of each"):
        load_arm(_chain(MAX_URDF_LINKS + 1))
    assert load_arm(_chain(MAX_URDF_LINKS - 1)).nq == MAX_URDF_LINKS - 1


def test_a_4000_link_chain_is_refused_in_one_line_where_pinocchio_alone_crashes(tmp_path):
    f = tmp_path / "chain.urdf"
    f.write_text(_chain(4000))
    # pinocchio alone, in a subprocess: the recursive reader crashes (or at least fails) on this file
    raw = subprocess.run([sys.executable, "-c", f"import pinocchio as p; p.buildModelFromXML(open({str(f)!r}).read())"],
                         capture_output=True, text=True, timeout=600)
    assert raw.returncode != 0
    ours = subprocess.run([sys.executable, "-m", "sim.cli", "check", str(f)], capture_output=True, text=True,
                          cwd=ROOT, timeout=600, env={**__import__("os").environ, "PYTHONPATH": str(ROOT)})
    assert ours.returncode == 1 and "Traceback" not in ours.stderr
    assert ours.stderr.strip().splitlines()[-1].endswith("(a much larger tree crashes the URDF reader)")


def test_check_reports_that_every_link_matches(tmp_path, capsys):
    f = tmp_path / "exo.urdf"
    f.write_text(exo_urdf(ExoParams()))
    assert main(["check", str(f)]) == 0
    assert "mass, centre of mass and inertia of the" in capsys.readouterr().out


_NUMBERS = st.sampled_from(["1", "0.01", "0", "-1", "nan", "inf", "1e300", "1e-300", "abc", "", "0.0_1", " 1 "])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(n=st.integers(0, 4), mass=_NUMBERS, ixx=_NUMBERS, izz=_NUMBERS,
       xyz=st.sampled_from(["0 0 0.1", "0 0", "1e20 0 0"]),
       kinds=st.lists(st.sampled_from(["revolute", "fixed", "continuous", "prismatic", "bogus"]), min_size=4,
                      max_size=4),
       parents=st.lists(st.integers(-1, 4), min_size=4, max_size=4), axis=st.sampled_from(["0 1 0", "0 0 0", "1"]),
       cut=st.integers(0, 40))
def test_random_small_urdf_variations_give_a_model_or_one_project_error(n, mass, ixx, izz, xyz, kinds, parents,
                                                                          axis, cut):
    parts = []
    for i in range(n):
        p = parents[i]
        parent = "base" if p < 0 or p >= i else f"l{p}"
        parts.append(_link(f"l{i}", mass=mass if i == 0 else "1", ixx=ixx, izz=izz)
                     + _joint(f"j{i}", parent, f"l{i}", kind=kinds[i], xyz=xyz, axis=axis))
    text = _robot(*parts)
    if cut:  # a truncated file
        text = text[: max(0, len(text) - cut)]
    try:
        arm = load_arm(text)
    except SandboxError as e:
        assert "\n" not in str(e) and str(e)
    else:
        assert arm.nq >= 1


# -- scenario values that would exhaust memory or never finish ----------------------------------
@functools.cache
def _reach():
    return load_scenario(ROOT / "scenarios" / "reach.py")


@pytest.mark.parametrize(("change", "match"), [
    ({"duration_s": 1e9}, rf"duration_s must be at most {MAX_DURATION_S:g} s"),
    ({"duration_s": math.inf}, "duration_s must be finite"),
    ({"substeps": 10**9}, rf"substeps must be at most {MAX_SUBSTEPS}, got 1000000000"),
    ({"control_period_s": 100.0}, r"control_period_s must be at most duration_s .* \(at least one tick\)"),
    ({"control_period_s": 1e-9}, rf"at most {MAX_TICKS} ticks"),
    ({"plant": {}}, "plant must be a PlantParams, got dict"),
])
def test_scenario_values_that_never_finish_are_refused_naming_the_field_and_the_limit(change, match):
    with pytest.raises(ParameterError, match=match):
        dataclasses.replace(_reach(), **change)


def test_a_sensor_delay_is_limited_in_seconds_and_its_delay_line_in_ticks():
    with pytest.raises(ParameterError, match=rf"ForceSensorParams.delay_ticks must be at most {MAX_DELAY_TICKS}"):
        ForceSensorParams(delay_ticks=10**12)
    late = ForceSensorParams(delay_ticks=2000)  # 2 s at 1 kHz
    with pytest.raises(ParameterError,
                       match=rf"force_sensor.delay_ticks = 2000 is 2 s .* at most {MAX_SENSOR_DELAY_S:g} s"):
        dataclasses.replace(_reach(), force_sensor=late)
    dataclasses.replace(_reach(), force_sensor=ForceSensorParams(delay_ticks=1000))  # exactly 1 s is allowed


def test_a_scenario_file_with_a_duration_over_the_limit_is_refused_and_leaves_no_folder(tmp_path, capsys):
    f = tmp_path / "forever.py"
    f.write_text("import dataclasses\nfrom sim.loop.scenario import load_scenario\n"
                 f"SCENARIO = dataclasses.replace(load_scenario({str(ROOT / 'scenarios' / 'reach.py')!r}), "
                 "duration_s=1e9)\n")
    out = tmp_path / "run"
    line = _one_line_error(capsys, ["run", str(f), "--out", str(out)])
    assert "forever.py" in line and "duration_s must be at most 3600 s" in line
    assert not out.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["forever.py"]


_FLOATS = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.sampled_from([1e-3, 0.5, 3600.0, 3600.1]))


@settings(max_examples=150, deadline=None)
@given(duration=_FLOATS, period=_FLOATS, substeps=st.one_of(st.integers(-5, 10**12), st.booleans(), st.just(2.0)),
       delay=st.integers(-3, 10**13))
def test_random_scenario_timing_is_accepted_within_the_limits_or_refused_in_one_line(duration, period, substeps,
                                                                                        delay):
    try:
        s = dataclasses.replace(_reach(), duration_s=duration, control_period_s=period, substeps=substeps,
                                force_sensor=ForceSensorParams(delay_ticks=delay))
    except ParameterError as e:
        assert "\n" not in str(e) and ("Scenario('reach')" in str(e) or "ForceSensorParams" in str(e))
    else:  # every limit holds (project bounds, documented in sim.loop.scenario)
        assert 0 < s.duration_s <= MAX_DURATION_S and 1 <= s.n_ticks <= MAX_TICKS
        assert 1 <= s.substeps <= MAX_SUBSTEPS
        assert s.force_sensor.delay_ticks * s.control_period_s <= MAX_SENSOR_DELAY_S


# -- CLI paths -------------------------------------------------------------------------------
@functools.cache
def _tiny_run(folder: str) -> Path:
    out = Path(folder) / "run"
    assert main(["run", str(ROOT / "scenarios" / "reach.py"), "--duration", "0.02", "--out", str(out)]) == 0
    return out


@pytest.fixture
def tiny_run(tmp_path_factory):
    return _tiny_run(str(tmp_path_factory.getbasetemp() / "tiny"))


@pytest.mark.parametrize("command", ["run", "compare", "sweep"])
@pytest.mark.parametrize("where", ["file", "under_file", "unwritable"])
def test_an_out_folder_that_cannot_be_one_is_refused_before_running(tmp_path, capsys, command, where):
    a_file = tmp_path / "a_file"
    a_file.write_text("x")
    out = {"file": a_file, "under_file": a_file / "sub",
           "unwritable": Path("/proc/no-such-folder/run")}[where]  # /proc refuses new entries, even to root
    line = _one_line_error(capsys, [command, str(ROOT / "scenarios" / "reach.py"), "--duration", "0.02",
                                    "--out", str(out)])
    assert repr(str(out)) in line
    assert {"file": "is a file; expected a folder", "under_file": "is a file, not a folder",
            "unwritable": "is not writable"}[where] in line
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a_file"]


@pytest.mark.parametrize("fps", ["inf", "nan", "0", "-5", "1e6"])
def test_replay_fps_outside_0_to_1000_is_a_usage_error(tiny_run, capsys, fps):
    with pytest.raises(SystemExit) as e:
        main(["replay", str(tiny_run), "--fps", fps])
    err = capsys.readouterr().err
    assert e.value.code == 2 and "Traceback" not in err
    assert err.strip().endswith(f"--fps must be a number of frames per second in (0, 1000], got {float(fps)}")


def _no_bench(*_, **__):
    raise AssertionError("the bench must not start when --json cannot be written")


@pytest.mark.parametrize(("target", "expected"), [
    ("missing/bench.json", "the folder"),
    ("a_folder", "is a folder; expected a file name"),
    ("/proc/bench.json", "is not writable"),
])
def test_bench_json_that_cannot_be_written_is_refused_before_the_bench(tmp_path, capsys, monkeypatch, target,
                                                                        expected):
    import sim.experiments.bench as bench

    monkeypatch.setattr(bench, "run_bench", _no_bench)
    (tmp_path / "a_folder").mkdir()
    monkeypatch.chdir(tmp_path)
    line = _one_line_error(capsys, ["bench", "--quick", "--json", target])
    assert expected in line and repr(target) in line


def test_bench_figures_are_printed_when_the_json_write_fails_after_the_bench(tmp_path, capsys, monkeypatch):
    import sim.experiments.bench as bench

    folder = tmp_path / "gone"
    folder.mkdir()

    def fake_bench(*_, **__):  # the folder disappears while the bench runs
        folder.rmdir()
        return {"figure": 1.0}

    monkeypatch.setattr(bench, "run_bench", fake_bench)
    monkeypatch.setattr(bench, "format_report", lambda report: f"FIGURES {report['figure']}")
    assert main(["bench", "--quick", "--json", str(folder / "b.json")]) == 1
    out, err = capsys.readouterr()
    assert "FIGURES 1.0" in out
    assert err.count("\n") == 1 and "the figures are printed above" in err


# -- a user's task whose rows() raises -------------------------------------------------------------
_BOOM_SCENARIO = '''
import dataclasses
from controllers.tasks import Task
from sim.loop.scenario import load_scenario


class Boom(Task):
    name, kind = "boom", "eq"

    def rows(self, state):
        if state.measurement.t_s > 0.01:
            raise ZeroDivisionError("a bug in the user's task")
        return None


SCENARIO = dataclasses.replace(load_scenario({reach!r}), name="boomy", controllers=("boomy",),
                               variants={{"boomy": [["joint_limits"], [Boom()], ["transparency"]]}})
'''


def test_a_task_that_raises_falls_back_for_its_ticks_and_the_run_says_so(tmp_path, capsys, caplog):
    import json
    import logging

    f = tmp_path / "boomy.py"
    f.write_text(_BOOM_SCENARIO.format(reach=str(ROOT / "scenarios" / "reach.py")))
    out = tmp_path / "run"
    caplog.set_level(logging.WARNING)  # on the root logger: the warm-up's own silence stays in force
    rc = main(["run", str(f), "--duration", "0.04", "--out", str(out)])
    stdout, stderr = capsys.readouterr()
    assert rc == 0 and "Traceback" not in stderr
    metrics = json.loads((out / "metrics.json").read_text())
    # ticks at t > 0.01 s of 40 ticks of 1 ms fail: about 29 of them, every one a fallback
    assert 25 <= metrics["hqp_fallback_count"] <= 30
    warnings = [r.getMessage() for r in caplog.records if "fell back" in r.getMessage()]
    assert len(warnings) == 1  # the first only, not one per tick
    assert "task 'boom': rows() raised ZeroDivisionError: a bug in the user's task" in warnings[0]
    last = stdout.strip().splitlines()[-1]
    assert last.startswith("warning: the controller fell back to gravity + damping on "
                           f"{metrics['hqp_fallback_count']} tick(s)")


# -- run folders from elsewhere --------------------------------------------------------------------
@pytest.mark.parametrize("bad", ["../../etc/passwd", "/etc/hostname", "..", ""])
@pytest.mark.parametrize("key", ["exo_urdf", "human_urdf"])
def test_a_meta_path_out_of_the_run_folder_is_refused_by_load_run_replay_and_compare(tiny_run, tmp_path, capsys,
                                                                                      bad, key):
    import json
    import shutil

    from sim.loop.runlog import RunLogError, load_run

    run = tmp_path / "copied"
    shutil.copytree(tiny_run, run)
    meta = json.loads((run / "meta.json").read_text())
    meta["models"][key] = bad
    (run / "meta.json").write_text(json.dumps(meta))
    with pytest.raises(RunLogError, match=rf"models.{key} = {bad!r} must name a file inside the run folder"):
        load_run(run)
    assert "must name a file inside" in _one_line_error(capsys, ["replay", str(run), "--html",
                                                                 str(tmp_path / "r.html")])
    assert "must name a file inside" in _one_line_error(capsys, ["compare", str(tiny_run), str(run),
                                                                 "--out", str(tmp_path / "cmp")])
    assert not (tmp_path / "cmp").exists() and not (tmp_path / "r.html").exists()


def _bomb_run(folder: Path, rows: int) -> Path:
    """A closed one-column log of 5 ticks in chunks of 10, whose only chunk is replaced by ``rows`` zeros that
    compress to a few hundred bytes; the chunk's own metadata and meta.json are made consistent with it."""
    import json

    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    from sim.loop.runlog import CHUNK_DIR, CHUNK_METADATA_KEY, RunLog

    with RunLog(folder, {"t": ()}, chunk_ticks=10, metadata={"n_ticks_planned": 5}) as log:
        for k in range(5):
            log.append(t=float(k))
    path = folder / CHUNK_DIR / "chunk_000000.parquet"
    table = pq.read_table(path)
    info = json.loads(table.schema.metadata[CHUNK_METADATA_KEY])
    info["ticks"] = rows
    bomb = pa.table({"t": np.zeros(rows)}).replace_schema_metadata({CHUNK_METADATA_KEY: json.dumps(info)})
    pq.write_table(bomb, path, compression="zstd", row_group_size=rows)
    meta = json.loads((folder / "meta.json").read_text())
    meta["ticks"] = rows
    (folder / "meta.json").write_text(json.dumps(meta))
    return path


def test_a_decompression_bomb_chunk_is_refused_from_its_footer_before_it_is_expanded(tmp_path, monkeypatch):
    import pyarrow.parquet as pq

    from sim.loop import runlog

    path = _bomb_run(tmp_path / "run", 2_000_000)
    assert path.stat().st_size < 100_000  # 16 MB of zeros as stored
    monkeypatch.setattr(pq, "read_table", _no_bench)  # nothing may be decompressed
    with pytest.raises(runlog.RunLogError, match=r"declares 2000000 rows; at most 5 are expected"):
        runlog.load_run(tmp_path / "run")


def test_a_chunk_declaring_more_values_than_the_limit_is_refused(tmp_path, monkeypatch):
    import json

    from sim.loop import runlog

    _bomb_run(tmp_path / "run", 1000)
    meta = json.loads((tmp_path / "run" / "meta.json").read_text())
    meta["chunk_ticks"], meta["n_ticks_planned"] = 10**12, 10**12  # a meta.json that lies as well
    (tmp_path / "run" / "meta.json").write_text(json.dumps(meta))
    monkeypatch.setattr(runlog, "MAX_CHUNK_VALUES", 999)
    with pytest.raises(runlog.RunLogError, match=r"declares 1000 rows x 1 columns; at most 999 values are read"):
        runlog.load_run(tmp_path / "run")
    monkeypatch.setattr(runlog, "MAX_CHUNK_VALUES", 1000)
    assert runlog.load_run(tmp_path / "run").ticks == 1000  # within every limit: read as before


class _Raising:
    """A user's task that fails in ``rows()`` (or, with ``in_bind``, already in ``bind()``)."""

    def __new__(cls, in_bind: bool = False):
        from controllers.tasks import Task

        class Broken(Task):
            name, kind = "broken", "eq"

            def bind(self, state):
                if in_bind:
                    raise KeyError("no_such_frame")

            def rows(self, state):
                return 1 / 0

        return Broken()


def test_the_fallback_tick_of_a_raising_task_commands_gravity_plus_damping():
    import pinocchio as pin

    import models
    from controllers.base import ControllerContext
    from controllers.hqp import HQPController
    from controllers.tasks import JointDamping
    from models.records import Measurement

    arm = models.build_exo()
    ctrl = HQPController([[_Raising()], [JointDamping()]], name="broken", fallback_damping_Nm_s_per_rad=2.0)
    ctrl.reset(ControllerContext(arm=arm, cuff_frames={"hand": "exo_cuff_hand"}))
    q, dq = np.radians([30, 10, 0, 45, 0, 0, 0]), np.full(7, 0.1)
    tau = ctrl.step(Measurement(0.25, q, dq, np.zeros(7), {"hand": np.zeros(6)}))
    # the fallback law of the controller's docstring, tau = g(q) - D dq, with g from pinocchio's own RNEA gravity
    g = pin.computeGeneralizedGravity(arm.model, arm.model.createData(), q)
    np.testing.assert_allclose(tau, g - 2.0 * dq, rtol=1e-9, atol=1e-9)
    assert ctrl.diagnostics()["fallback"] == 1.0 and ctrl.fallback_count == 1
    assert ctrl.last_fallback_reason == ("t = 0.250 s: level 0 (broken), task 'broken': rows() raised "
                                         "ZeroDivisionError: division by zero")


def test_a_task_whose_bind_raises_is_refused_at_reset_in_one_line():
    import models
    from controllers.base import ControllerContext
    from controllers.hqp import HQPController

    ctrl = HQPController([[_Raising(in_bind=True)]], name="broken")
    with pytest.raises(ParameterError, match=r"level 0 \(broken\), task 'broken': bind\(\) raised KeyError"):
        ctrl.reset(ControllerContext(arm=models.build_exo(), cuff_frames={"hand": "exo_cuff_hand"}))


@pytest.mark.parametrize("command", ["run", "compare", "sweep"])
def test_a_duration_option_over_the_limit_is_a_usage_error_before_any_folder(tmp_path, capsys, command):
    out = tmp_path / "out"
    with pytest.raises(SystemExit) as e:
        main([command, str(ROOT / "scenarios" / "reach.py"), "--duration", "1e9", "--out", str(out)])
    err = capsys.readouterr().err
    assert e.value.code == 2 and "Traceback" not in err and err.count("\n") == 1
    assert f"--duration must be at most {MAX_DURATION_S:g} s" in err
    assert not out.exists()


def test_a_urdf_file_over_the_size_limit_is_refused_before_it_is_read(tmp_path, monkeypatch):
    import models.arm as arm_module

    f = tmp_path / "big.urdf"
    f.write_text(_chain(3))
    monkeypatch.setattr(arm_module, "MAX_URDF_BYTES", 100)
    with pytest.raises(ModelError, match=r"big.urdf' is \d+ bytes; at most 100 bytes are read"):
        arm_module.read_urdf_file(f)
    with pytest.raises(ModelError, match=r"at most 100 are read"):
        arm_module.check_urdf(_chain(3))
