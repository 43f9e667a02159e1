"""Renderer backend choice: libLLVM >= 17 selects llvm_ad_rgb, anything else falls back to scalar_rgb."""

from __future__ import annotations

import pytest

from render import backend


def _fake_libs(tmp_path, names):
    for name in names:
        (tmp_path / name).write_bytes(b"")
    return (str(tmp_path),)


@pytest.fixture(autouse=True)
def _no_env(monkeypatch):
    monkeypatch.delenv("DRJIT_LIBLLVM_PATH", raising=False)
    monkeypatch.delenv("EVENFRAME_RENDER_VARIANT", raising=False)


def test_version_parsing_from_file_names():
    assert backend._llvm_major("/usr/lib/x86_64-linux-gnu/libLLVM-19.so") == 19
    assert backend._llvm_major("/usr/lib/x86_64-linux-gnu/libLLVM.so.19.1") == 19
    assert backend._llvm_major("/usr/lib/x86_64-linux-gnu/libLLVM-14.0.6.so.1") == 14
    assert backend._llvm_major("/usr/lib/libLLVM.so") is None


def test_old_llvm_only_is_refused_with_reason(tmp_path):
    dirs = _fake_libs(tmp_path, ["libLLVM-14.so", "libLLVM-15.so.1"])
    path, reason = backend.find_libllvm(dirs)
    assert path is None
    assert "14, 15" in reason and ">= 17" in reason


def test_newest_usable_llvm_is_chosen(tmp_path):
    dirs = _fake_libs(tmp_path, ["libLLVM-15.so", "libLLVM-17.so", "libLLVM-19.so"])
    path, reason = backend.find_libllvm(dirs)
    assert path.endswith("libLLVM-19.so") and "libLLVM 19" in reason


def test_environment_path_is_honoured_and_checked(tmp_path, monkeypatch):
    old = tmp_path / "libLLVM-15.so"
    old.write_bytes(b"")
    monkeypatch.setenv("DRJIT_LIBLLVM_PATH", str(old))
    choice = backend.choose_backend()
    assert choice.variant == "scalar_rgb" and "libLLVM 15" in choice.reason
    monkeypatch.setenv("DRJIT_LIBLLVM_PATH", str(tmp_path / "missing.so"))
    assert "does not exist" in backend.choose_backend().reason
    with pytest.raises(RuntimeError, match="llvm_ad_rgb requested"):
        backend.choose_backend("llvm_ad_rgb")


def test_scalar_can_be_forced(monkeypatch):
    monkeypatch.setenv("EVENFRAME_RENDER_VARIANT", "scalar_rgb")
    assert backend.choose_backend().variant == "scalar_rgb"
