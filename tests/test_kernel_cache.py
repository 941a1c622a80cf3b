"""``cavchar prepare-kernels``: it runs, and the kernels it touches are cached on disk.

Outside reference: numba's own dispatcher statistics (``Dispatcher.stats``): a kernel
compiled with ``cache=True`` records a cache hit or miss for each signature it was
called with; a kernel without an on-disk cache records neither.
"""

from __future__ import annotations


def test_the_command_prepares_a_kind(run_cli):
    code, out, err = run_cli("prepare-kernels", "--kind", "sampled")
    assert code == 0, err
    assert "sampled" in out and "ready" in out and "done in" in out


def test_an_unknown_kind_is_refused(run_cli):
    code, _, err = run_cli("prepare-kernels", "--kind", "spectrum")
    assert code == 2 and "invalid choice" in err


def test_the_probe_kernels_it_calls_use_the_disk_cache():
    from cavchar.kernel_cache import prepare_kernels
    from cavchar.models.probes import hmm_kernels

    prepare_kernels(["probes"])
    used = [f for f in vars(hmm_kernels).values()
            if hasattr(f, "stats") and hasattr(f, "signatures") and f.signatures]
    assert used, "preparing the probe kernels called no compiled kernel"
    for kernel in used:
        assert kernel._cache.__class__.__name__ == "FunctionCache", kernel  # cache=True
        stats = kernel.stats
        assert sum(stats.cache_hits.values()) + sum(stats.cache_misses.values()) > 0, kernel
