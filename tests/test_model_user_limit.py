"""The user's own memory limit, ORTHOCLIMB_MEMORY_LIMIT: parsed as dask.utils.parse_bytes reads
sizes, its headroom is the limit minus this process's resident memory (VmRSS, proc(5)), and
every memory check takes it into account."""

from __future__ import annotations

import pytest

import orthoclimb as oc
import orthoclimb.model.memory as memory
from orthoclimb.errors import InsufficientMemoryError
from orthoclimb.model.process_limits import status_bytes
from orthoclimb.model.user_limit import ENV_VAR, user_headroom, user_memory_limit
from orthoclimb.studies.engine import plan_workers

MiB = 2**20


@pytest.mark.parametrize(
    ("text", "expected"),
    [("8GiB", 8 * 2**30), ("500MB", 500 * 10**6), ("2e9", 2 * 10**9), (" 64 MiB ", 64 * MiB)],
)
def test_sizes_are_read_with_units(monkeypatch, text, expected):
    monkeypatch.setenv(ENV_VAR, text)
    assert user_memory_limit() == expected


@pytest.mark.parametrize("text", ["", "   "])
def test_unset_or_blank_means_no_limit(monkeypatch, text):
    monkeypatch.delenv(ENV_VAR, raising=False)
    assert user_memory_limit() is None and user_headroom() is None
    monkeypatch.setenv(ENV_VAR, text)
    assert user_memory_limit() is None and user_headroom() is None


@pytest.mark.parametrize("text", ["abc", "-5GB", "0", "inf", "nan", "8 parsecs", "1e400"])
def test_a_bad_limit_is_a_value_error_naming_it(monkeypatch, text):
    monkeypatch.setenv(ENV_VAR, text)
    with pytest.raises(ValueError, match=f"{ENV_VAR} must be a positive size.*got {text!r}"):
        user_memory_limit()
    # and so is every memory check: sampling refuses to guess
    with pytest.raises(ValueError, match=ENV_VAR):
        oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), 10, 0)


def test_headroom_is_the_limit_minus_resident_memory(monkeypatch):
    monkeypatch.setenv(ENV_VAR, "64GiB")
    rss = status_bytes()["VmRSS"]
    room = user_headroom()
    # VmRSS moves by pages between the two reads; a few MiB covers it
    assert abs(64 * 2**30 - rss - room) < 8 * MiB
    monkeypatch.setenv(ENV_VAR, "1kB")  # below what the process holds: no room at all
    assert user_headroom() == 0


def test_available_memory_takes_the_users_limit_and_names_it(monkeypatch):
    monkeypatch.setattr(memory, "machine_available_memory", lambda: 8 * 2**30)
    monkeypatch.setattr(memory, "cgroup_headroom", lambda: 5 * 2**30)
    monkeypatch.setattr(memory, "address_space_headroom", lambda: 3 * 2**30)
    monkeypatch.setattr(memory, "user_headroom", lambda: 2 * 2**30)
    monkeypatch.setattr(memory, "user_memory_limit", lambda: 2 * 2**30 + 100 * MiB)
    monkeypatch.setattr(memory, "resident_memory", lambda: 100 * MiB)
    monkeypatch.setenv(ENV_VAR, " 2GiB ")
    assert memory.available_memory() == 2 * 2**30
    assert memory.binding_limit(2 * 2**30) == (
        f" under {ENV_VAR}=2GiB, of which this process holds 100.0 MiB"
    )
    monkeypatch.setattr(memory, "user_headroom", lambda: 4 * 2**30)  # another limit binds
    assert memory.available_memory() == 3 * 2**30
    assert "ulimit -v" in memory.binding_limit(3 * 2**30)


def test_sampling_is_refused_above_the_users_limit_and_admitted_below(monkeypatch):
    mixture = oc.Mixture({3: 1.0})
    rss = status_bytes()["VmRSS"]
    monkeypatch.setenv(ENV_VAR, str(rss + 40 * MiB))
    big, small = 320, 40  # C(322, 3) x 8 bytes = 42 MiB > 40 MiB of room; 0.1 MiB
    assert oc.estimate_memory(mixture, big) > 40 * MiB
    with pytest.raises(InsufficientMemoryError, match=f"under {ENV_VAR}="):
        oc.Hamiltonian.sample(mixture, big, 0)
    assert oc.Hamiltonian.sample(mixture, small, 0).n == small
    # check_memory=False overrides it as it overrides the machine's own limits
    assert oc.Hamiltonian.sample(mixture, big, 0, check_memory=False).n == big


def test_the_cli_names_the_variable_and_refuses_a_bad_one(monkeypatch, capsys):
    from orthoclimb.cli import build_parser, main

    assert ENV_VAR in build_parser().format_help()
    monkeypatch.setenv(ENV_VAR, "lots")
    assert main(["climb", "--gammas", "3:1", "--n", "20", "--no-progress"]) == 2
    assert f"{ENV_VAR} must be a positive size in bytes such as 8GiB, 500MB or 2e9, got 'lots'" in (
        capsys.readouterr().err
    )


def test_a_sweep_plans_its_workers_with_their_own_memory():
    # each worker: two instances of 10 and 30 of its own; 100 holds two workers, not five
    assert plan_workers(8, 100, None, memory_per_task=10, memory=100).workers == 5
    assert plan_workers(8, 100, None, memory_per_task=10, memory=100, worker_memory=30).workers == 2
    assert plan_workers(8, 100, None, memory_per_task=10, memory=49, worker_memory=30).workers == 1


def test_a_sweep_whose_largest_instance_and_worker_exceed_the_limit_is_refused(
    monkeypatch, tmp_path, capsys
):
    from orthoclimb.cli import main

    need = oc.estimate_memory(oc.Mixture({3: 1.0}), 300)  # 34.7 MiB
    own = status_bytes()["VmRSS"]
    # room = limit - own is what the driver has; a worker needs about own + need of it
    monkeypatch.setenv(ENV_VAR, str(2 * own + need // 2))
    out = tmp_path / "study"
    argv = ["sweep", "--gammas", "3:1", "--n", "40,300", "--seeds", "0", "--out", str(out)]
    assert main([*argv, "--methods", "gradient", "--no-progress"]) == 2
    err = capsys.readouterr().err
    assert "largest instance (3:1.0, n = 300) needs 34.7 MiB" in err
    assert "a worker process about" in err and f"but {ENV_VAR}=" in err
    assert not out.exists()  # refused before the study folder is made


def test_a_limit_below_what_the_process_holds_says_so_and_offers_no_smaller_size(monkeypatch):
    # a user trial: at 50MB the message said the process "holds 47.7 MiB" (the limit itself:
    # limit minus a headroom floored at 0) while it held 110 MiB, and profile added "smaller
    # sizes fit" with 0 bytes free
    rss = status_bytes()["VmRSS"]
    monkeypatch.setenv(ENV_VAR, str(rss // 2))
    with pytest.raises(InsufficientMemoryError) as info:
        oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 10, 0)
    text = str(info.value)
    assert "but only 0 bytes (0 B) are available under ORTHOCLIMB_MEMORY_LIMIT=" in text
    held = float(text.split("this process already holds ")[1].split(" MiB")[0])
    assert abs(held * MiB - rss) < 8 * MiB  # its resident memory, not the limit
    assert text.endswith(
        ", more than the limit (nothing fits until the limit that binds is raised)"
    )


def test_a_plan_times_an_instance_that_fits_under_the_limit(monkeypatch, capsys):
    # a user trial: under a tight limit, climb --plan-only (which the refusal itself
    # recommends) was refused for its own 64 MiB timing instance, at an n never asked for
    from orthoclimb.cli import main

    rss = status_bytes()["VmRSS"]
    monkeypatch.setenv(ENV_VAR, str(rss + 40 * MiB))
    assert main(["climb", "--gammas", "3:1", "--n", "500", "--plan-only"]) == 0
    out = capsys.readouterr().out
    timed = int(out.split("(timed at n = ")[1].split(")")[0])
    assert oc.estimate_memory(oc.Mixture({3: 1.0}), timed) <= 20 * MiB < 64 * MiB
    assert "note: an instance of Mixture({3: 1.0}) with n = 500 needs" in out
    assert "plan only: no run, nothing written" in out


def test_an_external_plan_says_the_limit_holds_this_process_only(monkeypatch):
    # a user trial set the limit for a sweep on an external cluster and expected the workers
    # to keep to it; they follow their own environment, and the plan now says so
    from orthoclimb.studies.estimate import plan_lines
    from orthoclimb.studies.grid import spec_from_flags

    spec = spec_from_flags(["3:1"], None, "20", "0", "gradient")
    note = f"note: {ENV_VAR} holds this process only; the external cluster's workers follow"
    for value, shown in (("64GiB", True), ("", False)):
        monkeypatch.setenv(ENV_VAR, value)
        lines = plan_lines(spec, "s", spec.tasks(), None, "tcp://127.0.0.1:8786", None)
        assert any(line.startswith(note) for line in lines) is shown


def test_a_plan_with_no_room_to_time_anything_says_so_and_goes_on(monkeypatch, capsys):
    # a review: with the limit below what the process holds, climb --plan-only was refused
    # for a timing instance of n = 2, a size the user never asked for
    from orthoclimb.cli import main

    monkeypatch.setenv(ENV_VAR, "1kB")
    assert main(["climb", "--gammas", "3:1", "--n", "500", "--plan-only"]) == 0
    out = capsys.readouterr().out
    assert "no time estimate: the kernels could not be timed here: " in out
    assert "plan only: no run, nothing written" in out
