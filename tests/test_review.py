"""report.html: well-formed HTML whose tables hold the numbers of summary.json."""

import json
from html.parser import HTMLParser

from problems import tiny_bracket_toml
from topo.cli import main
from topo.review import fmt

VOID = {"meta", "img", "br", "hr", "link", "input"}


class Tables(HTMLParser):
    """Collects every table's rows of cell texts, and checks that tags nest."""

    def __init__(self):
        super().__init__()
        self.stack, self.tables, self.cell = [], [], None

    def handle_starttag(self, tag, attrs):
        if tag not in VOID:
            self.stack.append(tag)
        if tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self.cell = ""

    def handle_endtag(self, tag):
        assert self.stack and self.stack.pop() == tag, f"</{tag}> does not close the open tag"
        if tag in ("td", "th"):
            self.tables[-1][-1].append(self.cell)
            self.cell = None

    def handle_data(self, data):
        if self.cell is not None:
            self.cell += data


def test_report_is_well_formed_and_holds_the_summary_figures(tmp_path):
    f = tmp_path / "tiny.toml"
    f.write_text(tiny_bracket_toml(max_iterations=30, beta_interval=5))
    out = tmp_path / "run"
    assert main(["run", str(f), "--out", str(out), "--quiet"]) == 0
    text = (out / "report.html").read_text()
    s = json.loads((out / "summary.json").read_text())
    parser = Tables()
    parser.feed(text)
    parser.close()
    assert parser.stack == []  # every element closed
    assert text.count("data:image/png;base64,") == 4  # design, stress, deflection, history
    by_header = {tuple(t[0]): t[1:] for t in parser.tables}
    checks = by_header[("status", "check", "value", "limit", "what was checked")]
    assert [(r[0], r[1], r[2]) for r in checks] == [
        (c["status"], c["name"], fmt(c["value"])) for c in s["checks"]
    ]
    figures = dict((r[0], r[1:]) for r in by_header[("figure", "printed part", "optimiser (grey)")])
    assert figures["mass (kg)"] == [fmt(s["mass_kg"]), fmt(s["optimizer"]["mass_kg"])]
    assert figures["weighted compliance (N·mm)"] == [
        fmt(s["compliance_Nmm"]),
        fmt(s["optimizer"]["compliance_Nmm"]),
    ]
    assert "Concept design only" in text
    # rebuilt from the folder alone, it is the same document
    (out / "report.html").unlink()
    assert main(["report", str(out)]) == 0
    assert (out / "report.html").read_text() == text


def test_pictures_are_made_for_2d_and_3d_designs(tmp_path):
    from problems import beam_problem
    from topo import export, optimize, problem_from_dict

    for dim in (2, 3):
        d = beam_problem(dim, max_iterations=5)
        d["build"] = {"direction": "+x"}
        d["passive"] = [
            {
                "kind": "void",
                "region": {"sphere": {"center": [6.0, 2.0] + [2.0] * (dim - 2), "radius": 1.0}},
            }
        ]
        out = tmp_path / f"d{dim}"
        export(optimize(problem_from_dict(d)), out)
        for name in ("design.png", "stress.png", "deflection.png", "history.png"):
            data = (out / name).read_bytes()
            assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000, (dim, name)
        assert "data:image/png;base64," in (out / "report.html").read_text()
