"""Each formula cites its own sources, and the sources are the papers the formulas come from.

Bibliographic details are checked against the papers as we remember them (author, year, journal, volume,
first page: ``# from memory`` beside each); a report and the /docs page cite each formula by the numbers of
its own sources, not by the whole list.
"""

from __future__ import annotations

import dataclasses
import re
from html.parser import HTMLParser

import pytest

from calcservice import report
from calcservice.core import compute
from calcservice.registry import Calculation, calculations, register

#: outputs that are definitions (a ratio of two inputs) and need no source
DEFINITIONS = {("mass-loss-period-change", "relative_period_derivative")}

# from memory: author, year, journal, volume and first page of each paper cited
PUBLISHED = {
    "Eggleton (1983)": "ApJ 268, 368",
    "Eichler & V. Usov (1993)": "ApJ 402, 271",
    "Wilkin (1996)": "ApJ 469, 729",                   # Cantó, Raga & Wilkin
    "Pollock (1992)": "ApJ 386, 265",                  # Stevens, Blondin & Pollock
    "Wright & M. J. Barlow (1975)": "MNRAS 170, 41",
    "Panagia & M. Felli (1975)": "A&A 39, 1",
    "Leitherer & C. Robert (1991)": "ApJ 377, 629",
    "Lamers (2001)": "A&A 369, 574",                   # Vink, de Koter & Lamers
    "Nugis & H. J. G. L. M. Lamers (2000)": "A&A 360, 227",
    "Mikkola (1987)": "Celestial Mechanics 40, 329",
    "Jeans (1924)": "MNRAS 85, 2",
    "Huang (1963)": "ApJ 138, 471",
    "van den Heuvel (1997)": "A&A 327, 620",           # Soberman, Phinney & van den Heuvel
    "Prsa et al. 2016": "AJ 152, 41",                   # IAU 2015 Resolution B3
}


def all_references():
    return {r for c in calculations().values() for r in c.references}


@pytest.mark.parametrize("author", sorted(PUBLISHED))
def test_the_papers_are_cited_with_their_journal_volume_and_page(author):
    cited = [r for r in all_references() if author in r]
    assert cited, author
    for r in cited:
        assert PUBLISHED[author] in r, r


def test_every_output_names_the_sources_of_its_formula():
    missing = [(c.name, o.name) for c in calculations().values() for o in c.outputs
               if not o.references and (c.name, o.name) not in DEFINITIONS]
    assert missing == []


def sources(calc_name, output):
    return calculations()[calc_name].output(output).references


def test_each_formula_is_cited_by_the_paper_it_comes_from():
    assert all("Eggleton (1983)" in r for name in ("roche_lobe1", "roche_lobe2_apastron", "fill_factor1")
               for r in sources("geometry", name)[:1])
    assert not any("Murray" in r for r in sources("geometry", "roche_lobe1"))
    assert [r.split(" (")[0] for r in sources("collision", "opening_half_angle_eu93")] == ["D. Eichler & V. Usov"]
    assert all("Cantó" in r for r in sources("collision", "opening_half_angle_crw96"))
    assert all("Stevens" in r for r in sources("collision", "cooling_parameter1_periastron"))
    assert {r[:15] for r in sources("mass-loss-radio", "mass_loss_rate")} == {"A. E. Wright & ", "N. Panagia & M."}
    assert [r[:14] for r in sources("mass-loss-radio", "gaunt_factor")] == ["C. Leitherer &"]
    assert any("Jeans (1924)" in r for r in sources("mass-loss-period-change", "mass_loss_rate"))
    assert all("Heintz" in r or "Binnendijk" in r for r in sources("thiele-innes", "A"))
    # a mass in solar units from Hilditch's formula needs GM_sun: the IAU 2015 B3 nominal value
    assert any("2015 Resolution B3" in r for r in sources("sb2", "m1_sin3i"))
    assert not any("2012 Resolution B2" in r for r in sources("sb2", "mass_ratio"))


def test_a_calculation_cannot_cite_a_source_it_does_not_list():
    calc = calculations()["sb1"]
    wrong = dataclasses.replace(calc, name="sb1-wrongly-cited", path="/v1/test/wrongly-cited",
                                outputs=(dataclasses.replace(calc.outputs[0], references=("A. Nobody (2099)",)),))
    with pytest.raises(ValueError, match="cite references the calculation does not list"):
        register(wrong)


def cites(text, output):
    """The citation numbers printed after ``output``'s formula in a markdown report."""
    line = next(x for x in text.splitlines() if x.startswith(f"- `{output}`:"))
    found = re.search(r"\[([\d,–\s]*)\]\s*$", line)
    if found is None:
        return []
    numbers = []
    for part in found.group(1).split(","):
        lo, _, hi = part.strip().partition("–")
        numbers += list(range(int(lo), int(hi or lo) + 1))
    return numbers


def test_the_report_cites_each_formula_by_its_own_sources():
    calc = calculations()["geometry"]
    body = {"period": 118.3, "eccentricity": 0.62, "m1": 8.4, "m2": 5.1, "radius1": 4.3, "radius2": 2.9}
    text = report.markdown(compute("geometry", body), calc)
    refs = list(calc.references)
    assert [refs[k - 1][:14] for k in cites(text, "roche_lobe1")] == [
        r[:14] for r in refs if r in calc.output("roche_lobe1").references]
    assert "P. P. Eggleton" in refs[cites(text, "roche_lobe1")[0] - 1]
    assert len(cites(text, "roche_lobe1")) < len(refs)
    assert [refs[k - 1] for k in cites(text, "periastron_distance")] == [
        r for r in refs if r.startswith("C. D. Murray")]
    text = report.markdown(compute("mass-loss-period-change", {"period": 6.3, "period_derivative": 0.2,
                                                               "m1": 27.0, "m2": 11.0, "mode": "jeans"}),
                           calculations()["mass-loss-period-change"])
    assert cites(text, "relative_period_derivative") == []


class StrictHTML(HTMLParser):
    """Tags closed in order (void elements aside), ids unique, every local link pointing at an id."""

    VOID = {"meta", "link", "br", "img", "input", "hr", "col", "source", "wbr"}

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.ids, self.links, self.errors = [], [], [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if "id" in attrs:
            self.ids.append(attrs["id"])
        if tag == "a" and attrs.get("href", "").startswith("#") and "?" not in attrs["href"]:
            self.links.append(attrs["href"][1:])
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if tag in self.VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()


@pytest.fixture(scope="module")
def docs_html():
    from calcservice import create_app
    app = create_app()
    return app.test_client().get("/docs").get_data(as_text=True)


def test_the_docs_page_is_well_formed_and_its_citations_resolve(docs_html):
    p = StrictHTML()
    p.feed(docs_html)
    p.close()
    assert p.errors == [] and p.stack == []
    assert len(p.ids) == len(set(p.ids))
    assert set(p.links) <= set(p.ids)
    # the Roche lobe's row cites Eggleton (1983) by its number in the geometry section's list
    section = docs_html.split('id="geometry"')[1].split("</section>")[0]
    row = next(r for r in section.split("<tr>") if r.startswith("<td><code>roche_lobe1</code>"))
    numbers = re.findall(r'href="#geometry-ref(\d+)"', row)
    refs = re.findall(r'<li id="geometry-ref(\d+)">([^<]*)</li>', section)
    assert numbers and all("Eggleton" in dict(refs)[n] or "IAU" in dict(refs)[n] for n in numbers)


def test_the_json_answer_names_each_formulas_sources():
    body = {"period": 118.3, "eccentricity": 0.62, "m1": 8.4, "m2": 5.1}
    prov = compute("geometry", body)["provenance"]
    refs = prov["references"]
    assert [refs[k] for k in prov["formula_sources"]["roche_lobe1"]] == list(sources("geometry", "roche_lobe1"))
    assert "Eggleton (1983)" in refs[prov["formula_sources"]["roche_lobe1"][0]]
    assert set(prov["formula_sources"]) <= set(prov["formulas"])
