"""Scheduled (unattended) builds: reproducible bytes, incremental reuse, atomic publishing, the
output lock, the change report, the JSON log and the exit codes of `harmonize build`.

The demo project is copied into a temporary folder for every test that changes it. The kill
tests start a real `python -m harmonize build` and end it with SIGKILL while it holds the lock;
the documented hook HARMONIZE_TEST_PAUSE_BEFORE_SWAP holds it just before the swap.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from harmonize import publish
from harmonize.build import build_project, changes_file_paths
from harmonize.cli.main import EXIT_CODES, cli
from harmonize.errors import BuildLockedError
from harmonize.package_validate import validate_package
from harmonize.project import load_project

REPO = Path(__file__).resolve().parents[1]
# the one cell edited in the demo: NO23-001's tail length, "7,6" cm -> "7,9" cm
NORTH_FILE = Path("demo_sources/north/lizards.csv")
OLD_ROW, NEW_ROW = b"54,1;3,86;7,6;", b"54,1;3,86;7,9;"


def copy_demo(target: Path) -> Path:
    target.mkdir(parents=True, exist_ok=True)
    shutil.copy(REPO / "harmonize.yaml", target / "harmonize.yaml")
    for folder in ("mappings", "demo_sources", "vocab"):
        shutil.copytree(REPO / folder, target / folder)
    return target


def all_sources(root: Path) -> tuple[str, ...]:
    return tuple(m.source for m in load_project(root).mappings)


def digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


@pytest.fixture(scope="module")
def built_demo(tmp_path_factory) -> tuple[Path, dict[str, str]]:
    """A demo copy built once; tests clone it (project, cache and package) to change it."""
    root = copy_demo(tmp_path_factory.mktemp("built") / "demo")
    report = build_project(load_project(root))
    return root, digest(report.output)


@pytest.fixture
def demo(built_demo, tmp_path: Path) -> Path:
    root = tmp_path / "demo"
    shutil.copytree(built_demo[0], root)
    return root


def package_of(root: Path) -> Path:
    return root / "out" / "demo-package"


def leftovers(root: Path) -> list[str]:
    return sorted(p.name for p in package_of(root).parent.iterdir() if p.name.startswith("."))


# ------------------------------------------------------------------ deterministic, incremental


@pytest.mark.slow  # reads every source again
def test_two_fresh_builds_are_byte_identical(built_demo, tmp_path: Path) -> None:
    # the reproducibility promise of the issue: no run-dependent byte in any resource
    root = copy_demo(tmp_path / "other")
    again = build_project(load_project(root))
    assert digest(again.output) == built_demo[1]
    assert again.reused_sources == ()  # a fresh copy has no cache: every source was read


def test_incremental_rebuild_reuses_every_unchanged_source(demo: Path, built_demo) -> None:
    report = build_project(load_project(demo))
    assert report.reused_sources == all_sources(demo)
    assert digest(report.output) == built_demo[1]
    assert report.changes is not None and report.changes.previous_found
    assert not any(c.any for c in report.changes.values.values())


@pytest.mark.slow  # reads every source again
def test_full_rebuild_reads_everything_and_gives_the_same_bytes(demo: Path, built_demo) -> None:
    report = build_project(load_project(demo), full=True)
    assert report.reused_sources == ()
    assert digest(report.output) == built_demo[1]


def test_a_changed_mapping_invalidates_only_its_source(demo: Path) -> None:
    mapping = demo / "mappings" / "west-shrews.yaml"
    mapping.write_text(mapping.read_text(encoding="utf-8") + "\n# reviewed\n", encoding="utf-8")
    report = build_project(load_project(demo))
    assert "west-shrews" not in report.reused_sources
    assert set(report.reused_sources) == set(all_sources(demo)) - {"west-shrews"}


@pytest.mark.slow  # reads every source again
def test_a_changed_vocabulary_invalidates_every_source(demo: Path) -> None:
    vocabulary_file = sorted((demo / "vocab").glob("*.yaml"))[0]
    vocabulary_file.write_text(
        vocabulary_file.read_text(encoding="utf-8") + "\n# edited\n", encoding="utf-8"
    )
    report = build_project(load_project(demo))
    assert report.reused_sources == ()


def test_a_damaged_cache_entry_is_read_again_not_fatal(demo: Path, built_demo) -> None:
    for parquet in (demo / ".harmonize-cache").rglob("individual_values.parquet"):
        parquet.write_bytes(b"not parquet")
    report = build_project(load_project(demo))
    assert "north-lizards" not in report.reused_sources
    assert digest(report.output) == built_demo[1]


@pytest.mark.slow  # reads every source again
def test_parquet_packages_rebuild_identically_and_compare_cleanly(demo: Path) -> None:
    project_file = demo / "harmonize.yaml"
    text = project_file.read_text(encoding="utf-8")
    assert text.count("format: csv") == 1
    project_file.write_text(text.replace("format: csv", "format: parquet"), encoding="utf-8")
    first = build_project(load_project(demo))
    first_digest = digest(first.output)
    assert any(name.endswith(".parquet") for name in first_digest)
    again = build_project(load_project(demo))
    assert digest(again.output) == first_digest
    assert not any(c.any for c in again.changes.values.values())
    assert again.changes.values["individual_values"].unchanged == again.individual_values


# ------------------------------------------------------------------ one changed cell


def test_one_changed_cell_changes_exactly_its_record(demo: Path) -> None:
    before = pd.read_csv(package_of(demo) / "individual_values.csv", dtype=str)
    before_population = pd.read_csv(package_of(demo) / "population_summaries.csv", dtype=str)
    source = demo / NORTH_FILE
    data = source.read_bytes()
    assert data.count(OLD_ROW) == 1
    source.write_bytes(data.replace(OLD_ROW, NEW_ROW))

    report = build_project(load_project(demo))
    after = pd.read_csv(package_of(demo) / "individual_values.csv", dtype=str)
    target = before[
        (before["source_id"] == "north-lizards")
        & (before["individual_id"] == "NO23-001")
        & (before["trait_id"] == "tail_length")
    ]["record_id"]
    assert len(target) == 1
    record_id = target.iloc[0]

    # the package: same record ids, one row differs, and only in that record
    assert list(after["record_id"]) == list(before["record_id"])
    differing = (before.fillna("") != after.fillna("")).any(axis=1)
    assert list(after.loc[differing, "record_id"]) == [record_id]
    row = after.set_index("record_id").loc[record_id]
    # 7.9 cm = 79 mm: SI Brochure, 9th ed. (2019), Table 7 (centi = 1e-2, milli = 1e-3)
    assert float(row["value"]) == pytest.approx(79.0, rel=1e-12)
    assert row["original_value"] == "7,9"

    # the change report says the same
    changes = report.changes
    individual = changes.values["individual_values"]
    assert (individual.added, individual.removed, individual.changed) == (0, 0, 1)
    assert individual.changed_ids == (record_id,)
    assert individual.by_trait == {"tail_length": {"added": 0, "removed": 0, "changed": 1}}
    assert individual.by_source == {"north-lizards": {"added": 0, "removed": 0, "changed": 1}}
    assert {"value", "original_value"} <= set(individual.changed_columns)
    assert not {"record_id", "trait_id", "taxon", "source_row"} & set(individual.changed_columns)
    _only_summaries_of_that_individual_changed(demo, report, before_population, row)
    assert changes.sources_changed == ("north-lizards",)
    assert set(changes.sources_reused) == set(all_sources(demo)) - {"north-lizards"}
    assert changes.rejects_difference == {}

    json_file, text_file = changes_file_paths(report.output)
    document = json.loads(json_file.read_text(encoding="utf-8"))
    assert document["values"]["individual_values"]["record_ids"]["changed"] == [record_id]
    assert document["sources"]["changed"] == ["north-lizards"]
    text = text_file.read_text(encoding="utf-8")
    assert "tail_length: 1 changed" in text
    # the report lives beside the package, never inside it (the package stays reproducible)
    assert json_file.parent == report.output.parent
    assert not any(p.name.endswith(".changes.json") for p in report.output.iterdir())


def _only_summaries_of_that_individual_changed(demo, report, before, individual) -> None:
    """Summaries computed from individuals (if the project asks for them) are derived from the
    edited cell too: only those of its taxon, trait and source may change, by the right amount."""
    after = pd.read_csv(package_of(demo) / "population_summaries.csv", dtype=str)
    population = report.changes.values["population_summaries"]
    assert (population.added, population.removed) == (0, 0)
    assert list(after["record_id"]) == list(before["record_id"])
    changed = after.set_index("record_id").loc[list(population.changed_ids)]
    old = before.set_index("record_id").loc[list(population.changed_ids)]
    assert (changed["trait_id"] == "tail_length").all()
    assert (changed["source_id"] == "north-lizards").all()
    assert (changed["taxon"] == individual["taxon"]).all()
    assert (changed["sd_method"] == "computed from individuals").all()
    # one of n values raised by 3 mm raises their arithmetic mean by 3/n (definition of the mean)
    shift = changed["mean"].astype(float) - old["mean"].astype(float)
    assert shift.to_numpy() == pytest.approx(3.0 / changed["n"].astype(float).to_numpy())
    unchanged = after[~after["record_id"].isin(population.changed_ids)]
    same = before.set_index("record_id").loc[unchanged["record_id"]].fillna("")
    assert (same.to_numpy() == unchanged.set_index("record_id").fillna("").to_numpy()).all()


def test_a_removed_source_and_new_reject_reasons_are_reported(demo: Path) -> None:
    (demo / "mappings" / "west-shrews.yaml").unlink()
    report = build_project(load_project(demo))
    changes = report.changes
    assert changes.sources_removed == ("west-shrews",)
    population = changes.values["population_summaries"]
    assert population.removed > 0 and population.added == 0
    assert set(population.by_source) == {"west-shrews"}
    assert changes.rejects_difference  # the shrew table's rejects are gone
    assert all(d < 0 for d in changes.rejects_difference.values())


def test_names_newly_waiting_for_review_are_listed(demo: Path) -> None:
    # a new column no vocabulary entry fits: one more name waits for review, in every row
    source = demo / NORTH_FILE
    lines = source.read_bytes().decode("latin-1").splitlines()
    lines = [lines[0] + ";wibble factor"] + [line + ";1" for line in lines[1:]]
    source.write_bytes(("\n".join(lines) + "\n").encode("latin-1"))
    report = build_project(load_project(demo))
    changes = report.changes
    assert changes.new_names_needing_review == (("north-lizards", "wibble factor"),)
    assert len(changes.names_needing_review) == len(report.names_needing_review)
    assert changes.rejects_difference == {"unmatched-name": len(lines) - 1}
    document = json.loads(changes_file_paths(report.output)[0].read_text(encoding="utf-8"))
    assert document["names_needing_review"]["new"] == [
        {"source_id": "north-lizards", "name": "wibble factor"}
    ]


# ------------------------------------------------------------------ lock


def test_a_second_build_is_refused_while_one_holds_the_lock(demo: Path) -> None:
    output = package_of(demo)
    before = digest(output)
    with publish.output_lock(output) as lock:
        with pytest.raises(BuildLockedError) as caught:
            build_project(load_project(demo))
        assert f"pid {os.getpid()}" in str(caught.value)
        result = CliRunner().invoke(cli, ["build", str(demo)])
        assert isinstance(result.exception, BuildLockedError)
        assert result.exception.exit_code == 5  # the exit code table: 5 = locked
        assert lock.path.is_file()
    assert digest(output) == before
    assert not lock.path.exists()  # released on exit


def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid  # kill(2): signal 0 to this pid now fails with ESRCH


def _write_lock(output: Path, **fields) -> Path:
    owner = {
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "started": "2026-01-01T00:00:00+00:00",
        "token": "0123456789abcdef",
        "boot_id": publish._boot_id(),
        "process_start": None,
        **fields,
    }
    path = publish.lock_path(output)
    path.write_text(json.dumps(owner), encoding="utf-8")
    return path


def test_a_stale_lock_of_a_dead_process_is_taken_over(demo: Path) -> None:
    pid = _dead_pid()
    lock = _write_lock(package_of(demo), pid=pid)
    report = build_project(load_project(demo))
    assert report.lock_taken_over is not None and f"pid {pid}" in report.lock_taken_over
    assert not lock.exists()
    assert leftovers(demo) == []


@pytest.mark.skipif(not Path("/proc/sys/kernel/random/boot_id").exists(), reason="needs Linux")
def test_a_lock_from_before_a_reboot_is_stale(demo: Path) -> None:
    # our own pid is alive, but proc(5) boot_id says the lock was taken in another boot
    _write_lock(package_of(demo), boot_id="00000000-0000-0000-0000-000000000000")
    report = build_project(load_project(demo))
    assert report.lock_taken_over is not None


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc")
def test_a_reused_pid_does_not_keep_a_lock_alive(demo: Path) -> None:
    # same live pid, different start time (proc(5), /proc/<pid>/stat field 22): another process
    _write_lock(package_of(demo), process_start="1")
    report = build_project(load_project(demo))
    assert report.lock_taken_over is not None


def test_a_lock_from_another_host_is_never_broken(demo: Path) -> None:
    _write_lock(package_of(demo), pid=_dead_pid(), host=socket.gethostname() + "-elsewhere")
    with pytest.raises(BuildLockedError) as caught:
        build_project(load_project(demo))
    assert "-elsewhere" in str(caught.value) and "delete" in str(caught.value)


def test_an_empty_lock_file_left_by_a_crash_is_taken_over(demo: Path) -> None:
    path = publish.lock_path(package_of(demo))
    path.write_text("", encoding="utf-8")
    old = time.time() - 2 * publish.UNREADABLE_LOCK_GRACE_SECONDS
    os.utime(path, (old, old))
    build_project(load_project(demo))
    assert not path.exists()


def test_a_writer_dying_while_writing_its_lock_leaves_no_lock(demo: Path, monkeypatch) -> None:
    # a kill between creating the lock file and filling it used to leave an empty lock, and a
    # build started right after gave up ("other builds keep taking it"); the lock is now linked
    # into place only once written
    output = package_of(demo)

    def failing_fsync(descriptor: int) -> None:
        raise OSError(errno.EIO, "simulated I/O error")

    with monkeypatch.context() as patch:
        patch.setattr(publish.os, "fsync", failing_fsync)
        with pytest.raises(OSError):
            publish.acquire_lock(output)
    assert not publish.lock_path(output).exists()
    assert leftovers(demo) == []  # the draft is gone too
    assert build_project(load_project(demo)).lock_taken_over is None


def test_a_young_unreadable_lock_is_waited_for_then_taken_over(demo: Path, monkeypatch) -> None:
    # e.g. left by an older version killed mid-write: wait out the grace time, not give up
    monkeypatch.setattr(publish, "UNREADABLE_LOCK_GRACE_SECONDS", 3.0)
    path = publish.lock_path(package_of(demo))
    path.write_text("", encoding="utf-8")
    started = time.monotonic()
    build_project(load_project(demo))
    assert time.monotonic() - started >= 2.5  # it did wait for the lock to turn stale
    assert not path.exists()


def test_the_lock_works_where_the_file_system_has_no_hard_links(demo: Path, monkeypatch) -> None:
    def no_links(source, target) -> None:
        raise OSError(errno.EPERM, "Operation not permitted")

    monkeypatch.setattr(publish.os, "link", no_links)
    output = package_of(demo)
    with publish.output_lock(output) as lock:
        assert json.loads(lock.path.read_text(encoding="utf-8"))["token"] == lock.owner.token
        with pytest.raises(BuildLockedError):
            publish.acquire_lock(output)
    assert not lock.path.exists()
    assert leftovers(demo) == []


@pytest.mark.parametrize("kind", ["draft", "stale"])
def test_lock_files_left_by_a_kill_are_removed(demo: Path, kind: str) -> None:
    # a kill between writing a draft and linking it, or between moving a stale lock aside and
    # deleting it (the pattern for the latter was wrong before, so these stayed)
    lock = publish.lock_path(package_of(demo))
    left = lock.with_name(f"{lock.name}.{kind}-1-00ff")
    left.write_text("{", encoding="utf-8")
    report = build_project(load_project(demo))
    assert left.name in report.leftovers_removed
    assert leftovers(demo) == []


# ------------------------------------------------------------------ atomic publishing


def test_fallback_swap_is_restored_after_a_kill_between_its_renames(demo: Path) -> None:
    output = package_of(demo)
    before = digest(output)
    # the state a kill between the two renames of the fallback swap leaves behind
    hidden = output.with_name(f".{output.name}.previous-99999")
    os.replace(output, hidden)
    with publish.output_lock(output):
        restored = publish.clean_leftovers(output)
    assert digest(output) == before
    assert restored and not hidden.exists()


def test_fallback_swap_publishes_the_new_package(demo: Path, monkeypatch) -> None:
    monkeypatch.setattr(publish, "_exchange", lambda first, second: False)
    source = demo / NORTH_FILE
    source.write_bytes(source.read_bytes().replace(OLD_ROW, NEW_ROW))
    report = build_project(load_project(demo))
    assert report.changes.values["individual_values"].changed == 1
    assert validate_package(report.output).valid
    assert leftovers(demo) == []


def _start_paused_build(root: Path, pause: float) -> subprocess.Popen:
    env = dict(os.environ, **{publish.PAUSE_BEFORE_SWAP_VARIABLE: str(pause)})
    return subprocess.Popen(
        [sys.executable, "-m", "harmonize", "build", "--quiet", str(root)],
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )


def _wait_for_staged_package(output: Path, process: subprocess.Popen, timeout: float = 120) -> None:
    """Until the child holds the lock and its staging package is complete (it then pauses)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        staged = list(output.parent.glob(f".{output.name}.staging-*/datapackage.json"))
        if staged and publish.lock_path(output).is_file():
            return
        if process.poll() is not None:
            pytest.fail(f"build ended early: {process.stderr.read().decode()[-2000:]}")
        time.sleep(0.05)
    process.kill()
    pytest.fail("the build never reached its staging package")


@pytest.mark.slow
def test_a_build_killed_mid_publish_leaves_the_previous_package(demo: Path) -> None:
    output = package_of(demo)
    before = digest(output)
    source = demo / NORTH_FILE
    source.write_bytes(source.read_bytes().replace(OLD_ROW, NEW_ROW))
    process = _start_paused_build(demo, pause=120)
    try:
        _wait_for_staged_package(output, process)
        # while it runs, a concurrent build of the same output is refused (exit code 5)
        second = subprocess.run(
            [sys.executable, "-m", "harmonize", "build", "--quiet", str(demo)],
            capture_output=True,
            text=True,
            timeout=300,
        )
        assert second.returncode == 5
        assert f"pid {process.pid}" in second.stderr
        process.send_signal(signal.SIGKILL)  # kill -9: no cleanup code runs
    finally:
        process.kill()
        process.wait(timeout=60)
    assert process.returncode == -signal.SIGKILL
    assert digest(output) == before  # untouched and complete
    assert validate_package(output).valid
    assert publish.lock_path(output).is_file()  # the dead build's lock is still there
    assert any(".staging-" in name for name in leftovers(demo))

    report = build_project(load_project(demo))  # the next night's run
    assert report.lock_taken_over is not None and f"pid {process.pid}" in report.lock_taken_over
    assert any(".staging-" in name for name in report.leftovers_removed)
    assert leftovers(demo) == []
    assert report.changes.values["individual_values"].changed == 1
    assert validate_package(output).valid


@pytest.mark.slow
def test_a_build_killed_while_reading_leaves_the_previous_package(demo: Path) -> None:
    output = package_of(demo)
    before = digest(output)
    shutil.rmtree(demo / ".harmonize-cache")  # make it read every source
    process = _start_paused_build(demo, pause=0)
    deadline = time.monotonic() + 120
    while not publish.lock_path(output).is_file() and time.monotonic() < deadline:
        if process.poll() is not None:
            break
        time.sleep(0.01)
    process.send_signal(signal.SIGKILL)
    process.wait(timeout=60)
    assert digest(output) == before
    assert validate_package(output).valid
    assert build_project(load_project(demo)).validation.valid
    assert leftovers(demo) == []


# ------------------------------------------------------------------ command line and docs


def test_quiet_json_log_on_stdout_is_only_json_lines(demo: Path) -> None:
    result = CliRunner().invoke(cli, ["build", "--quiet", "--log-json", "-", str(demo)])
    events = [json.loads(line) for line in result.stdout.splitlines()]  # every line parses
    assert [e["event"] for e in events][0] == "start"
    assert events[-1]["event"] == "finished"
    assert events[-1]["exit_code"] == result.exit_code == 1  # demo: names wait for review
    assert {e["source"] for e in events if e["event"] == "source-reused"} == set(all_sources(demo))
    assert {"writing", "validated", "published"} <= {e["event"] for e in events}


def test_json_log_file_records_a_configuration_error(demo: Path, tmp_path: Path) -> None:
    log = tmp_path / "nightly.jsonl"
    (demo / "harmonize.yaml").write_text("name: [unclosed\n", encoding="utf-8")
    result = CliRunner().invoke(cli, ["build", "-q", "--log-json", str(log), str(demo)])
    assert result.exception is not None and result.exception.exit_code == 3
    last = json.loads(log.read_text(encoding="utf-8").splitlines()[-1])
    assert (
        last["event"] == "finished" and last["exit_code"] == 3 and "harmonize.yaml" in last["error"]
    )


def test_build_help_and_readme_document_every_exit_code() -> None:
    help_text = CliRunner().invoke(cli, ["build", "--help"]).output
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    nightly = readme[readme.index("## Nightly imports") :]
    for code in EXIT_CODES:
        assert f"  {code}  " in help_text
    for code in (0, 1, 3, 4, 5):  # the codes a scheduler acts on (the list)
        assert f"{code})" in nightly
    assert "--log-json" in nightly and "--quiet" in help_text


def test_the_readme_nightly_command_runs(demo: Path, monkeypatch) -> None:
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    nightly = readme[readme.index("## Nightly imports") :]
    line = next(x for x in nightly.splitlines() if x.startswith("harmonize build"))
    monkeypatch.chdir(demo)
    result = CliRunner().invoke(cli, line.split()[1:])
    log = demo / "logs" / "build.jsonl"
    last = json.loads(log.read_text(encoding="utf-8").splitlines()[-1])
    assert last["event"] == "finished" and last["exit_code"] == result.exit_code
    assert result.exit_code in (0, 1)
    assert "reading north-lizards ..." not in result.output  # --quiet: no progress lines
