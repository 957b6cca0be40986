"""Acceptance: the demo submitted from the dashboard, the command line and the Python client
gives the same numbers on all three (README walk-through, one stack)."""
import csv

import numpy as np
import pytest

from cli.main import main as cli_main
from stifflane_client import Client
from tests.conftest import example_path
from tests.dashboard.browser import Browser, require_browser
from tests.dashboard.test_browser import submit_demo_from_the_page

pytestmark = pytest.mark.e2e
DEMO = example_path("jobs", "tarnwhistle_demo.json")


def read_csv(path) -> tuple[list[str], np.ndarray]:
    rows = [r for r in csv.reader(open(path)) if not r[0].startswith("#")]  # the caution line
    return rows[0], np.array(rows[1:], dtype=float)


def test_dashboard_cli_and_client_agree_on_the_demo(stack, tmp_path, capsys):
    sync_api = require_browser()
    with sync_api.sync_playwright() as pw:
        b = Browser(pw, "laptop")
        try:
            submit_demo_from_the_page(b, stack.base)
            b.page.wait_for_selector(".state.succeeded", timeout=180_000)
            with b.page.expect_download() as info:
                b.page.click("#downloads [data-fmt=csv]")
            dash_cols, dash = read_csv(info.value.path())
        finally:
            b.close()

    out = tmp_path / "cli.csv"
    assert cli_main(["submit", str(DEMO), "--server", stack.base, "--wait", "-q", "-o", str(out)]) == 0
    cli_cols, cli = read_csv(out)

    res = Client(stack.base).run(DEMO, timeout=180)

    assert dash_cols == cli_cols  # CSV headers carry units: "S [mol/L]"
    assert [c.split(" [")[0] for c in cli_cols] == res.columns and res.unit("S") == "mol/L"
    assert dash.shape == cli.shape == res.table().shape == (121, 11)
    # One engine, one spec: the three runs are the same computation, bit for bit.
    np.testing.assert_array_equal(dash, cli)
    np.testing.assert_array_equal(cli, res.table())
