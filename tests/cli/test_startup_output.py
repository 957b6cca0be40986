"""What `stifflane up` and `stifflane warm` print: progress while kernels compile, and the
framed block with the key and the URLs (and the client's URL variable on a custom port)."""
import io
import re
from pathlib import Path

from cli.main import DEFAULT_API_PORT, ready_block
from cli.warm import Progress, cache_is_cold, compile_listener


def test_compiling_shows_a_running_count_the_function_and_the_time():
    from numba import njit
    from numba.core import event

    out = io.StringIO()
    progress = Progress(out, interval=3600, tty=False)  # the ticker stays silent: lines come from stop()
    with event.install_listener("numba:compile", compile_listener(progress)):
        @njit(cache=False)
        def probe_for_the_progress_line(x):
            return x + 1

        assert probe_for_the_progress_line(1) == 2
        assert progress.compiling == []
    assert progress.compiled >= 1
    progress.stop()
    line = out.getvalue().strip().splitlines()[-1]
    assert re.fullmatch(r"compiling: \d+ functions? done \(\d+ s\)", line.strip()), line


def test_the_ticker_prints_while_a_compile_runs():
    out = io.StringIO()
    progress = Progress(out, interval=0.05, tty=False)
    progress.compiling.append("radau_step")
    progress.start()
    import time

    deadline = time.time() + 30  # generous on a loaded machine; one tick is 0.05 s
    while "now radau_step" not in out.getvalue() and time.time() < deadline:
        time.sleep(0.05)
    progress.stop()
    assert "compiling: 0 functions done; now radau_step (0 s)" in out.getvalue()


def test_an_empty_cache_is_cold_and_one_with_kernels_is_not(tmp_path):
    assert cache_is_cold(tmp_path / "missing") and cache_is_cold(tmp_path)
    (tmp_path / "vm.py").mkdir()
    (tmp_path / "vm.py" / "run-1.py311.nbi").write_bytes(b"")
    assert not cache_is_cold(tmp_path)


def test_the_block_frames_the_key_and_urls_and_names_the_url_variable_on_a_custom_port():
    key_path = Path("var/local.key")
    block = ready_block("http://127.0.0.1:9000", "slk_abc", key_path, 9000)
    lines = block.strip().splitlines()
    assert lines[0] == lines[-1] and set(lines[0]) == {"+", "-"}
    assert all(line.startswith("|") and line.endswith("|") and len(line) == len(lines[0]) for line in lines[1:-1])
    assert "export STIFFLANE_URL=http://127.0.0.1:9000" in block and "slk_abc" in block
    assert "export STIFFLANE_KEY=$(cat var/local.key)" in block
    default = ready_block(f"http://127.0.0.1:{DEFAULT_API_PORT}", "slk_abc", key_path, DEFAULT_API_PORT)
    assert "STIFFLANE_URL" not in default  # the client's default address already points here
