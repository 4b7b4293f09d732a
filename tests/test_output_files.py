"""Output files: all-or-nothing for regular files, and never destroying a device,
a pipe or a link (common practice for command-line tools writing reports)."""
from __future__ import annotations

import os
import stat

import pytest

from chainplan.errors import UsageError
from chainplan.render.files import write_atomic
from conftest import REPO

CHAIN = str(REPO / "chains" / "hydrophone_buffered.yaml")


def test_dash_means_standard_output(cli, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    rc, out, _ = cli("check", CHAIN, "--junit", "-")
    assert rc == 0 and "<testsuites" in out and not (tmp_path / "-").exists()


def test_a_link_to_a_device_stays_a_link_and_the_device_stays_a_device(tmp_path):
    link = tmp_path / "sink"
    os.symlink("/dev/null", link)
    write_atomic({str(link): "data"})
    assert os.path.islink(link) and stat.S_ISCHR(os.stat("/dev/null").st_mode)


def test_a_link_to_a_regular_file_has_its_target_replaced(tmp_path):
    target = tmp_path / "real.xml"
    target.write_text("old")
    link = tmp_path / "latest.xml"
    os.symlink(target, link)
    write_atomic({str(link): "new"})
    assert os.path.islink(link) and target.read_text() == "new"


def test_a_full_device_is_a_one_line_error_and_no_regular_file_is_left(tmp_path):
    if not os.path.exists("/dev/full"):
        pytest.skip("no /dev/full on this system")
    ok = tmp_path / "ok.txt"
    with pytest.raises(UsageError, match="No space left"):
        write_atomic({str(ok): "first", "/dev/full": "second"})
    assert not ok.exists() and not any(p.name.endswith(".part") for p in tmp_path.iterdir())
