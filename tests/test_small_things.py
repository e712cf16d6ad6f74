"""Smaller things a reader noticed: sidecar warnings in the terminal, errors naming the sidecar, the preview's
icon, units beside the index's estimates, axis labels kept apart."""

from __future__ import annotations

import threading
import urllib.request
from pathlib import Path

from conftest import cli, write_csv, write_toml

from sitegen.preview import make_server

LINE = "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n6,11.8\n"


def test_a_misspelt_sidecar_key_is_printed_in_the_terminal_too(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", LINE)
    write_toml(data / "a.toml", 'titel = "A"\n')
    site = tmp_path / "site"
    first = cli("build", data, "-o", site, "-j", "1")
    assert first.code == 0
    assert "warning: a.toml: unknown sidecar key 'titel' was ignored; did you mean 'title'?" in first.output
    again = cli("build", data, "-o", site, "-j", "1")  # nothing changed: said again
    assert "unknown sidecar key 'titel'" in again.output


def test_an_error_about_a_sidecar_key_names_the_sidecar(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", LINE)
    write_toml(data / "a.toml", 'compare = "z"\n')
    write_csv(data / "b.csv", LINE)
    write_toml(data / "b.toml", "level = 2\n")
    result = cli("build", data, "-o", tmp_path / "site", "-j", "1")
    assert result.code == 1
    lines = [line for line in result.output.splitlines() if line.startswith("error:")]
    assert any(line.startswith("error: a.toml: compare = 'z'") for line in lines), lines
    assert any(line.startswith("error: b.toml: key 'level'") for line in lines), lines
    assert any(line.endswith("(dataset a.csv was not fitted)") for line in lines), lines


def test_preview_serves_an_icon(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", LINE)
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    server = make_server(site, 0)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        port = server.server_address[1]
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/favicon.ico") as answer:
            assert answer.status == 200
            assert answer.headers["Content-Type"] == "image/svg+xml"
            assert answer.read().startswith(b"<svg")
    finally:
        server.shutdown()
        server.server_close()


def test_index_estimates_carry_their_units(tmp_path: Path) -> None:
    data = tmp_path / "data"
    write_csv(data / "a.csv", LINE)
    write_toml(data / "a.toml", 'units = { x = "mg/L", y = "AU" }\n')
    site = tmp_path / "site"
    assert cli("build", data, "-o", site, "-j", "1").code == 0
    index = (site / "index.html").read_text(encoding="utf-8")
    row = index.split('href="datasets/a/index.html"')[1].split("</tr>")[0]
    assert "<small>AU per mg/L</small>" in row
    assert "<small>AU</small>" in row  # the scatter about the line


def test_chart_axes_keep_their_labels_apart() -> None:
    root = Path(__file__).resolve().parents[1]
    script = (root / "themes" / "default" / "static" / "site.js").read_text(encoding="utf-8")
    axis = script[script.index("var axis = {") :].split("};")[0]
    assert 'labelOverlap: "greedy"' in axis
    assert "labelSeparation" in axis
