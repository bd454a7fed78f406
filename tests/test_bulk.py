"""The collector pause around bulk stages restores the collector as it found it."""

import gc

import pytest

from routerisk._bulk import bulk, collector_paused


def test_paused_inside_and_resumed_after():
    assert gc.isenabled()
    with collector_paused():
        assert not gc.isenabled()
        with collector_paused():  # nested: only the outermost resumes
            assert not gc.isenabled()
        assert not gc.isenabled()
    assert gc.isenabled()


def test_resumed_after_an_error_and_left_off_when_it_was_off():
    @bulk
    def fails() -> None:
        assert not gc.isenabled()
        raise ValueError("boom")

    with pytest.raises(ValueError, match="boom"):
        fails()
    assert gc.isenabled()
    gc.disable()
    try:
        with collector_paused():
            pass
        assert not gc.isenabled()  # the caller had it off: it stays off
    finally:
        gc.enable()


def test_build_and_load_run_with_the_collector_paused(monkeypatch, tmp_path):
    from routerisk import datasets
    from routerisk.network import folder, tagging

    seen = []
    real = tagging.tag_edges
    monkeypatch.setattr(
        tagging, "tag_edges", lambda *a, **k: seen.append(gc.isenabled()) or real(*a, **k)
    )
    net = folder.build_network(datasets.get_path("town"), timezone="Etc/GMT+3")
    assert seen == [False] and gc.isenabled()
    assert (
        folder.load_network(folder.save_network(net, tmp_path / "net")).edges.shape
        == net.edges.shape
    )
    assert gc.isenabled()
