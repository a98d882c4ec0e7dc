"""Tests of the on-disk profile store (solver.physics.profilecache) and its use by
solver.physics.emission.

Every test points BANDWRIGHT_CACHE_DIR at its own temporary directory.  "Built" is counted by
wrapping :func:`solver.physics.emission.simulate_amplifier_psd`, the step the store exists to skip.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import logging
import os
import subprocess
import sys
import textwrap
import time
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from solver.model import Amplifier, AmplifierModel, Modulation, Window
from solver.physics import emission, profilecache
from solver.physics.emission import EmissionKey, build_profile, get_profile
from solver.physics.profilecache import CACHE_DIR_ENV, cache_dir, load_arrays, store_arrays

ROOT = Path(__file__).resolve().parents[1]
KEY = EmissionKey(
    0.2, 12, amplifier=Amplifier(AmplifierModel.RAPP, 2.0, 5.0), modulation=Modulation.QPSK
)
SUBPROCESS_TIMEOUT_S = 120.0


@dataclasses.dataclass
class Builds:
    """Number of amplifier simulations run since the fixture started."""

    count: int = 0


@pytest.fixture
def store(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[Path]:
    """An empty cache directory and an empty in-memory cache; yields the profile directory."""
    monkeypatch.setenv(CACHE_DIR_ENV, str(tmp_path / "cache"))
    get_profile.cache_clear()
    yield tmp_path / "cache" / profilecache.SUBDIRECTORY
    get_profile.cache_clear()


@pytest.fixture
def builds(monkeypatch: pytest.MonkeyPatch) -> Builds:
    counter = Builds()
    simulate = emission.simulate_amplifier_psd

    def counting(*args: Any, **kwargs: Any) -> tuple[np.ndarray, np.ndarray]:
        counter.count += 1
        return simulate(*args, **kwargs)

    monkeypatch.setattr(emission, "simulate_amplifier_psd", counting)
    return counter


def _files(directory: Path) -> list[Path]:
    return sorted(directory.glob("*.npz"))


def _from_disk(key: EmissionKey) -> emission.SpectrumProfile:
    """The profile as a new process would get it: in-memory cache empty."""
    get_profile.cache_clear()
    return get_profile(key)


def _assert_identical(a: emission.SpectrumProfile, b: emission.SpectrumProfile) -> None:
    for name in ("freq", "psd", "edges", "cumulative", "upper_tail"):
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype and x.shape == y.shape, name
        assert x.tobytes() == y.tobytes(), f"{name} differs in some bit"
    assert a._table.rows.tobytes() == b._table.rows.tobytes()
    assert a.nominal_bandwidth == b.nominal_bandwidth


# --- round trip ---------------------------------------------------------------------------


def test_loaded_profile_is_bit_identical_to_a_fresh_one(store: Path, builds: Builds) -> None:
    first = get_profile(KEY)
    assert builds.count == 1 and len(_files(store)) == 1
    loaded = _from_disk(KEY)
    assert builds.count == 1, "the second lookup simulated instead of loading"
    assert loaded is not first
    fresh = build_profile(KEY)
    _assert_identical(loaded, fresh)
    assert loaded.guard_needed(45.0) == fresh.guard_needed(45.0)


def test_linear_profiles_are_not_stored(store: Path) -> None:
    get_profile(EmissionKey(0.2, 12))
    assert not store.exists() or not _files(store)


# --- other processes ----------------------------------------------------------------------

CHILD = textwrap.dedent(
    """
    import hashlib, json
    from solver.physics import emission
    from solver.model import Amplifier, AmplifierModel, Modulation

    calls = []
    simulate = emission.simulate_amplifier_psd
    def counting(*args, **kwargs):
        calls.append(1)
        return simulate(*args, **kwargs)
    emission.simulate_amplifier_psd = counting
    key = emission.EmissionKey(
        0.2, 12, amplifier=Amplifier(AmplifierModel.RAPP, 2.0, 5.0), modulation=Modulation.QPSK
    )
    profile = emission.get_profile(key)
    psd = hashlib.sha256(profile.psd.tobytes()).hexdigest()
    print(json.dumps({"builds": len(calls), "psd": psd, "guard": repr(profile.guard_needed(45.0))}))
    """
)


def _child(cache: Path) -> dict[str, Any]:
    env = dict(os.environ, **{CACHE_DIR_ENV: str(cache)})
    done = subprocess.run(
        [sys.executable, "-c", CHILD],
        env=env,
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=SUBPROCESS_TIMEOUT_S,
        check=True,
    )
    result: dict[str, Any] = json.loads(done.stdout)
    return result


def test_a_second_process_loads_instead_of_building(tmp_path: Path) -> None:
    directory = tmp_path / profilecache.SUBDIRECTORY
    first = _child(tmp_path)
    assert first["builds"] == 1
    (path,) = _files(directory)
    written = path.stat().st_mtime_ns
    second = _child(tmp_path)
    assert second["builds"] == 0
    assert path.stat().st_mtime_ns == written, "the second process rewrote the file"
    fresh = build_profile(KEY)
    assert second["psd"] == first["psd"] == hashlib.sha256(fresh.psd.tobytes()).hexdigest()
    assert second["guard"] == first["guard"] == repr(fresh.guard_needed(45.0))


# --- damaged files ------------------------------------------------------------------------


def _another_profile(path: Path) -> bytes:
    """The whole, valid file of another key's profile."""
    other = VARIANTS["amplifier.output_backoff_db"]
    get_profile(other)
    return (path.parent / f"{_digest(other)}.npz").read_bytes()


def _nan_density(path: Path) -> bytes:
    with np.load(path) as stored:
        contents = {name: stored[name] for name in stored.files}
    contents["density"] = contents["density"].copy()
    contents["density"][7] = np.nan
    buffer = io.BytesIO()
    np.savez(buffer, **contents)
    return buffer.getvalue()


DAMAGE = {
    "empty": lambda path: b"",
    "truncated": lambda path: path.read_bytes()[: path.stat().st_size // 2],
    "garbage": lambda path: np.random.default_rng(5).bytes(4096),
    "another key's profile": _another_profile,
    "nan in the density": _nan_density,
}


@pytest.mark.parametrize("damage", DAMAGE)
def test_a_damaged_file_is_a_miss_and_is_rewritten(
    store: Path, builds: Builds, damage: str, caplog: pytest.LogCaptureFixture
) -> None:
    get_profile(KEY)
    (path,) = _files(store)
    path.write_bytes(DAMAGE[damage](path))
    damaged = builds.count
    with caplog.at_level(logging.INFO):
        rebuilt = _from_disk(KEY)
    assert builds.count == damaged + 1
    assert any("recomputing" in r.getMessage() for r in caplog.records)
    reloaded = _from_disk(KEY)
    assert builds.count == damaged + 1, "the rewritten file was not used"
    fresh = build_profile(KEY)
    _assert_identical(rebuilt, fresh)
    _assert_identical(reloaded, fresh)


# --- what the key holds -------------------------------------------------------------------


def _digest(key: EmissionKey, seed: int = emission.DEFAULT_SEED) -> str:
    return profilecache.key_digest(emission._stored_fields(key, seed))


VARIANTS = {
    "rolloff": dataclasses.replace(KEY, rolloff=0.25),
    "span_symbols": dataclasses.replace(KEY, span_symbols=16),
    "window": dataclasses.replace(KEY, window=Window.HANN),
    "modulation": dataclasses.replace(KEY, modulation=Modulation.APSK16),
    "amplifier.model": dataclasses.replace(
        KEY, amplifier=dataclasses.replace(KEY.amplifier, model=AmplifierModel.SALEH)
    ),
    "amplifier.smoothness": dataclasses.replace(
        KEY, amplifier=dataclasses.replace(KEY.amplifier, smoothness=3.0)
    ),
    "amplifier.output_backoff_db": dataclasses.replace(
        KEY, amplifier=dataclasses.replace(KEY.amplifier, output_backoff_db=5.5)
    ),
}


def test_the_variants_cover_every_field() -> None:
    # A field added to EmissionKey or Amplifier needs a variant here.
    names = {f.name for f in dataclasses.fields(EmissionKey) if f.name != "amplifier"}
    names |= {f"amplifier.{f.name}" for f in dataclasses.fields(Amplifier)}
    assert names == set(VARIANTS)


def test_every_field_seed_and_constant_changes_the_file_name(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    names = {"base": _digest(KEY), "seed": _digest(KEY, seed=1)}
    names |= {field: _digest(key) for field, key in VARIANTS.items()}
    monkeypatch.setattr(emission, "AMPLIFIER_SYMBOLS", emission.AMPLIFIER_SYMBOLS // 2)
    names["symbols"] = _digest(KEY)
    monkeypatch.setattr(emission, "WELCH_WINDOW", "hann")
    names["welch window"] = _digest(KEY)
    assert len(set(names.values())) == len(names)


def test_different_keys_are_different_files(store: Path) -> None:
    profiles = [get_profile(KEY), get_profile(VARIANTS["amplifier.output_backoff_db"])]
    assert len(_files(store)) == 2
    loaded = [_from_disk(KEY), _from_disk(VARIANTS["amplifier.output_backoff_db"])]
    for before, after in zip(profiles, loaded, strict=True):
        _assert_identical(before, after)
    assert loaded[0].guard_needed(45.0) != loaded[1].guard_needed(45.0)


def test_a_version_change_is_a_miss(
    store: Path, builds: Builds, monkeypatch: pytest.MonkeyPatch
) -> None:
    get_profile(KEY)
    monkeypatch.setattr(emission, "PROFILE_VERSION", emission.PROFILE_VERSION + 1)
    _from_disk(KEY)
    assert builds.count == 2 and len(_files(store)) == 2


# --- concurrent writers -------------------------------------------------------------------

WRITER = textwrap.dedent(
    """
    import sys, time
    from pathlib import Path
    import numpy as np
    from solver.physics.profilecache import store_arrays

    ident, size, seconds, gate = int(sys.argv[1]), int(sys.argv[2]), float(sys.argv[3]), sys.argv[4]
    Path(gate, f"ready-{ident}").touch()
    while not Path(gate, "go").exists():
        time.sleep(0.001)
    data = {"freq": np.full(size, float(ident)), "density": np.full(size, float(ident))}
    end, writes = time.monotonic() + seconds, 0
    while time.monotonic() < end:
        store_arrays({"shared": "key"}, data)
        writes += 1
    print(writes)
    """
)
WRITERS = 3
ARRAY_SIZE = 1 << 17
WRITE_SECONDS = 1.5


def _uniform_writer(arrays: dict[str, np.ndarray]) -> float:
    """The single writer id all elements of both arrays carry (fails on mixed content)."""
    values = np.unique(np.concatenate([arrays["freq"], arrays["density"]]))
    assert values.size == 1 and arrays["freq"].size == ARRAY_SIZE, "mixed or short content"
    return float(values[0])


def test_concurrent_processes_leave_one_whole_file(store: Path, tmp_path: Path) -> None:
    gate = tmp_path / "gate"
    gate.mkdir()
    writers = [
        subprocess.Popen(
            [sys.executable, "-c", WRITER, str(i), str(ARRAY_SIZE), str(WRITE_SECONDS), str(gate)],
            cwd=ROOT,
            stdout=subprocess.PIPE,
            text=True,
        )
        for i in range(1, WRITERS + 1)
    ]
    deadline = time.monotonic() + SUBPROCESS_TIMEOUT_S
    while len(list(gate.glob("ready-*"))) < WRITERS:
        assert time.monotonic() < deadline and all(w.poll() is None for w in writers)
        time.sleep(0.01)
    (gate / "go").touch()
    seen: set[float] = set()
    reads = 0
    try:
        while any(w.poll() is None for w in writers):
            existed = bool(_files(store))  # once there, a file is only replaced, never removed
            arrays = load_arrays({"shared": "key"}, ("freq", "density"))
            if arrays is not None:
                seen.add(_uniform_writer(arrays))
                reads += 1
            elif existed:
                pytest.fail("a reader found the file but could not load it")
    finally:
        for w in writers:
            if w.poll() is None:
                w.kill()
    writes = [int(w.communicate(timeout=SUBPROCESS_TIMEOUT_S)[0]) for w in writers]
    assert all(w.returncode == 0 for w in writers)
    assert min(writes) > 1 and reads > 1, (writes, reads)
    final = load_arrays({"shared": "key"}, ("freq", "density"))
    assert final is not None and _uniform_writer(final) in {1.0, 2.0, 3.0}
    assert len(seen) > 1, "the reader saw one writer's file only: the writes did not interleave"
    assert [p.name for p in store.iterdir()] == [_files(store)[0].name], "temporary files left"


def test_concurrent_threads_leave_one_whole_file(store: Path) -> None:
    def write(ident: int) -> None:
        data = np.full(ARRAY_SIZE, float(ident))
        for _ in range(10):
            store_arrays({"shared": "key"}, {"freq": data, "density": data})

    with ThreadPoolExecutor(4) as pool:
        list(pool.map(write, range(1, 5)))
    final = load_arrays({"shared": "key"}, ("freq", "density"))
    assert final is not None and _uniform_writer(final) in {1.0, 2.0, 3.0, 4.0}
    assert len(list(store.iterdir())) == 1


# --- directory ----------------------------------------------------------------------------


def test_an_unwritable_directory_warns_once_and_keeps_profiles_in_memory(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture
) -> None:
    blocker = tmp_path / "a-file"
    blocker.write_text("not a directory")
    monkeypatch.setenv(CACHE_DIR_ENV, str(blocker / "cache"))  # mkdir fails, even for root
    get_profile.cache_clear()
    try:
        with caplog.at_level(logging.WARNING, logger="solver.physics.profilecache"):
            first = get_profile(KEY)
            second = get_profile(VARIANTS["rolloff"])
        assert get_profile(KEY) is first
    finally:
        get_profile.cache_clear()
    warnings = [r for r in caplog.records if r.levelno == logging.WARNING]
    assert len(warnings) == 1 and "in memory only" in warnings[0].getMessage()
    _assert_identical(first, build_profile(KEY))
    _assert_identical(second, build_profile(VARIANTS["rolloff"]))


@pytest.mark.parametrize("value", ["", "off", " OFF "])
def test_the_store_can_be_switched_off(
    value: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    monkeypatch.setenv(CACHE_DIR_ENV, value)
    assert cache_dir() is None
    store_arrays({"k": 1}, {"freq": np.ones(3)})
    assert load_arrays({"k": 1}, ("freq",)) is None
    assert list(tmp_path.iterdir()) == []


def test_the_default_is_the_user_cache_directory(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    if sys.platform != "linux":
        pytest.skip("XDG_CACHE_HOME steers platformdirs on Linux only")
    monkeypatch.delenv(CACHE_DIR_ENV, raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert cache_dir() == tmp_path / "bandwright" / profilecache.SUBDIRECTORY


def test_the_suite_never_uses_the_real_user_cache() -> None:
    # tests/conftest.py points the variable at a temporary directory for the whole session.
    directory = cache_dir()
    assert directory is not None
    assert directory != profilecache.resolve_cache_dir(None)
