"""The HTML report: well-formed, self-contained, every embedded figure a decodable PNG."""

from __future__ import annotations

import base64
import io
import warnings
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.image
import numpy as np
import pytest

import ident
from ident.data.load import load_dataset
from ident.errors import IdentError
from ident.handover.check import validate_dataset
from ident.handover.paramfile import load_parameters
from ident.handover.report import render_report, write_report

DEMO = Path(__file__).resolve().parents[1] / "datasets_demo"
VOID = {"meta", "img", "br", "hr", "link", "input", "col", "area", "base", "source", "wbr"}


class StrictChecker(HTMLParser):
    """Python's own html.parser (standard library) with a stack: every element closed, properly nested."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.images, self.external, self.doctype = [], [], [], [], False

    def handle_decl(self, decl):
        self.doctype = decl.lower() == "doctype html"

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.images.append(a.get("src", ""))
        for key in ("src", "href"):
            if key in a and not a[key].startswith(("data:", "#")):
                self.external.append(a[key])
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in VOID:
            self.stack.pop()

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
        else:
            self.stack.pop()


@pytest.fixture(scope="module")
def demo():
    robot = ident.load_robot(DEMO / "sprout6.urdf")
    truth = load_parameters(DEMO / "sprout6_truth.yaml", robot)
    held = load_dataset([DEMO / "sprout6_heldout.csv"], robot=robot, options={"cutoff": 10.0, "windows": [[0.0, 8.0]]})
    fitd = load_dataset([DEMO / "sprout6_excite.csv"], robot=robot, options={"cutoff": 10.0, "windows": [[0.0, 10.0]]})
    return robot, truth, held, fitd


def check_html(text: str) -> StrictChecker:
    p = StrictChecker()
    p.feed(text)
    p.close()
    assert p.doctype, "no <!DOCTYPE html>"
    assert p.errors == [] and p.stack == [], (p.errors, p.stack)
    assert p.external == [], f"report refers to outside files: {p.external}"
    for src in p.images:
        head, _, data = src.partition(",")
        assert head == "data:image/png;base64"
        img = matplotlib.image.imread(io.BytesIO(base64.b64decode(data, validate=True)), format="png")
        assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100
        assert np.ptp(img[..., :3]) > 0.2  # not a blank canvas
    return p


def test_report_of_a_fit_with_held_out_check(tmp_path, demo):
    from ident.estimation.estimate import fit

    robot, truth, held, fitd = demo
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ps = fit(robot, fitd, method="wls", terms=("fv", "fc", "ia")).to_parameter_set()
    val = validate_dataset(robot, ps, held)
    out = tmp_path / "report.html"
    write_report(out, robot, ps, validation=val, validation_data=held, fit_data=fitd, reference=truth)
    text = out.read_text(encoding="utf-8")
    p = check_html(text)
    assert len(p.images) == 3  # data coverage, the friction curves and the held-out torque plots
    for title in ("The arm and the data", "What joint torques can identify", "How well the motion excites the model",
                  "Identified values", "Held-out check", "Before you use this model"):
        assert title in text
    for j in robot.joint_names:
        assert j in text
    # the figures in the table are the validation's own
    assert f"{val.rms[1]:.4g}" in text and f"{val.r2[1]:.4f}" in text
    # legibility: the "at t" column of the terminal table, the noise floor and collision tables,
    # regrouping relations that wrap
    assert "at t (s)" in text and f"{val.max_error_time[1]:.3f}" in text
    assert "RMS error against the noise floor" in text and "collision-detection thresholds" in text
    assert '<pre class="wrap">' in text
    assert "ISO 10218" in text  # the safety cautions travel with the report


def test_report_without_held_out_data_says_so(demo):
    robot, truth, _, _ = demo
    text = render_report(robot, truth)
    p = check_html(text)
    assert p.images == []
    assert "No held-out data were given" in text


def test_report_flags_impossible_links(demo):
    robot, truth, held, _ = demo
    bad = load_parameters(DEMO / "sprout6_truth.yaml", robot)
    bad.inertial[3, 0] = -0.2  # a negative mass on the wrist housing
    text = render_report(robot, bad, validation=validate_dataset(robot, bad, held), validation_data=held)
    check_html(text)
    assert "wrist_housing are not physically consistent" in text


def test_report_path_errors(tmp_path, demo):
    robot, truth, _, _ = demo
    with pytest.raises(IdentError, match="html"):
        write_report(tmp_path / "report.txt", robot, truth)
    with pytest.raises(IdentError, match="does not exist"):
        write_report(tmp_path / "missing" / "report.html", robot, truth)
    assert list(tmp_path.iterdir()) == []
