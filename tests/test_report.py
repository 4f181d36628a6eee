"""The HTML report pages, built from a small run folder made by gloam's own stage functions.

The run folder is real: a tiny simulated experiment (:func:`gloam.demo.write_demo`) goes
through preparation, the fuzzifier choice, two scan jobs, the selection and the exports of
:mod:`gloam.stages`, so the page reads the same file formats as the workflow writes. One
responsive gene is renamed ``<script>alert(1)</script>`` before the preparation.

Sources named beside the checks: the WHATWG HTML Living Standard (which elements and
attributes fetch resources; how ``<script>`` content ends; how a parser tokenises markup),
RFC 2397 (``data:`` URLs), RFC 3986 (relative references), Python's ``html.parser`` and
``html.escape``, ``json`` and ``base64`` modules as independent decoders, Pillow for PNG
files, and headless Chromium (Debian package ``chromium``) as the browser.
"""

from __future__ import annotations

import base64
import json
import re
import shutil
import subprocess
import urllib.parse
import warnings
from html.parser import HTMLParser
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from gloam import stages
from gloam.demo import write_demo
from gloam.errors import GloamError
from gloam.prepare import read_prepared, read_prepared_replicates
from gloam.report import (
    DISPLAY_DIGITS,
    RESEARCH_ONLY_NOTE,
    cited_references,
    methods_paragraph,
    read_run,
    write_index_page,
    write_run_page,
)

HOSTILE = "<script>alert(1)</script>"
RUN = "tiny"
SCANNED = (2, 3)
SETTINGS = {
    "seed": 7,
    "time_unit": "h",
    "preparation": {
        "gene_selection": "responsive",
        "normalisation": "median_ratio",
        "pseudocount": 1.0,
        "fdr": 0.05,
        "min_log2_range": 1.0,
        "replicate_summary": "mean",
    },
    "fuzzifier": {"m": "auto", "n_clusters_check": 3},
    "scan": {
        "min_clusters": min(SCANNED),
        "max_clusters": max(SCANNED),
        "n_starts": 4,
        "max_starts": 8,
        "tol": 1e-4,
        "max_iter": 200,
        "init": "kmeans++",
        "precision": "float64",
        "n_resamples": 4,
        "noise_class": True,
    },
    # c fixed, so that the page shows clusters whatever the rule recommends on such tiny data
    "selection": {"n_clusters": max(SCANNED), "structure_n_null": 10},
    "genesets": {"thresholds": [0.5, 0.7]},
}


# ------------------------------------------------------------------ the run folder


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """A small run folder in the workflow's formats, and a summary over two runs.

    ``consensus.npz`` holds the documented arrays (README, "Outputs"); the tables, gene sets
    and summary are then written by gloam's own writers (:func:`gloam.stages.export_tables`,
    :func:`gloam.stages.export_gene_sets`, :func:`gloam.stages.summarise_runs`); the JSON
    records and preparation tables mirror the files of a real run.
    """
    root = tmp_path_factory.mktemp("report")
    run = root / "results" / RUN
    (run / "prepared").mkdir(parents=True)
    rng = np.random.default_rng(5)
    times = np.array([0.0, 0.5, 1.0, 2.0, 6.0, 24.0])
    columns = [f"t{t:g}" for t in times]
    names = ["C1", "C2", "C3"]
    genes = np.array([HOSTILE, *(f"G{k:03d}" for k in range(1, 40))])
    label = np.arange(genes.size) % (len(names) + 1)  # the last label: genes near no cluster
    centroids = rng.normal(size=(len(names), times.size))
    centroids = (centroids - centroids.mean(1, keepdims=True)) / centroids.std(1, keepdims=True)
    raw = rng.dirichlet(np.ones(len(names) + 1), genes.size)
    raw[np.arange(genes.size), label] += 3.0
    raw /= raw.sum(axis=1, keepdims=True)
    memberships, noise = raw[:, : len(names)], raw[:, len(names)]
    largest = memberships.max(axis=1)
    low = np.clip(memberships - 0.05, 0.0, 1.0)
    high = np.clip(memberships + 0.05, 0.0, 1.0)
    np.savez(
        run / "consensus.npz",
        memberships=memberships, noise=noise,
        top_class=np.where(noise > largest, -1, memberships.argmax(axis=1)),
        top_membership=np.maximum(largest, noise), start_agreement=np.ones(genes.size),
        top_agreement=rng.uniform(0.8, 1.0, genes.size), membership_low=low,
        membership_high=high, core_frequency=(memberships >= 0.5).astype(float),
        jaccard=rng.uniform(0.8, 1.0, (4, len(names))), centroids=centroids,
        cluster_names=np.array(names), genes=genes, columns=np.array(columns), times=times,
        conditions=np.array(["cold"] * times.size), m=np.float64(1.4),
        noise_distance=np.float64(times.size - 1), metrics=np.str_(json.dumps({"n_clusters": 3})),
    )  # fmt: skip
    stages.export_tables(
        run / "consensus.npz", out_memberships=run / "memberships.tsv",
        out_centroids=run / "centroids.tsv", out_clusters=run / "clusters.tsv",
        out_robustness=run / "robustness.tsv",
    )  # fmt: skip
    stages.export_gene_sets(
        run / "consensus.npz", SETTINGS["genesets"]["thresholds"], run / "genesets", prefix=RUN
    )
    zscores = centroids[np.minimum(label, len(names) - 1)] + rng.normal(0, 0.3, (genes.size, 6))
    pd.DataFrame(zscores, index=pd.Index(genes, name="gene"), columns=columns).to_csv(
        run / "prepared" / "zscores.tsv", sep="\t"
    )
    dropped = [f"D{k:03d}" for k in range(1, 8)]
    status = ["kept"] * genes.size + ["not_significant"] * 5 + ["small_change"] * 2
    pd.DataFrame(
        {
            "gene": [*genes, *dropped], "status": status, "n_missing": 0, "n_filled": 0,
            "n_samples_expressed": 12, "mean_log": rng.uniform(4, 10, len(status)),
            "sd": rng.uniform(0.2, 1.5, len(status)),
            "log2_range": rng.uniform(0.3, 3, len(status)),
            "response_statistic": rng.uniform(0.5, 40, len(status)),
            "response_p_value": rng.uniform(0, 1, len(status)),
            "response_fdr": rng.uniform(0, 1, len(status)),
        }
    ).to_csv(run / "prepared" / "gene_report.tsv", sep="\t", index=False)  # fmt: skip
    reasons = ["too_many_missing", "flat", "not_significant", "small_change", "kept"]
    pd.DataFrame({"reason": reasons, "n_genes": [0, 0, 5, 2, genes.size]}).to_csv(
        run / "prepared" / "summary.tsv", sep="\t", index=False
    )
    pd.DataFrame(
        {
            "n_clusters": list(SCANNED), "m": 1.4, "min_jaccard": [0.9, 0.8],
            "resampling": "replicates", "passes": [True, True], "failed": ["", ""],
            "reason": ["passes every criterion, but the larger c = 3 passes too",
                       "largest c whose clusters are all robust"],
            "recommended": [False, True], "used": [False, True],
        }
    ).to_csv(run / "validity.tsv", sep="\t", index=False)  # fmt: skip
    flag_detail = "recommended c = 3 is the largest scanned"
    selection = {
        "n_clusters": 3, "method": "auto", "recommended": 3,
        "reason": "largest c whose clusters are all robust", "scanned": list(SCANNED),
        "structure": {"alpha": 0.01, "n_clusters": 3, "n_null": 30, "null_mean": 0.4,
                      "null_sd": 0.01, "p_value": 1e-9, "present": True, "statistic": 0.3,
                      "z_score": -6.0},
        "criteria": {"stable_jaccard": 0.75, "min_core_genes": 10,
                     "max_centroid_correlation": 0.85, "min_coherence": 0.5},
        "flags": ["c_at_scan_edge"], "flag_details": {"c_at_scan_edge": flag_detail},
    }  # fmt: skip
    (run / "selection.json").write_text(json.dumps(selection, indent=2))
    fuzzifier = {
        "m": 1.4, "method": "formula", "formula_m": 1.4, "setting": "auto",
        "n_clusters_check": 3, "n_genes": int(genes.size), "n_columns": 6,
        "check_structure_index": 0.01, "check_passed": True,
    }  # fmt: skip
    (run / "fuzzifier.json").write_text(json.dumps(fuzzifier, indent=2))
    (run / "figures").mkdir()
    from PIL import Image

    Image.new("RGB", (600, 300), "#0072B2").save(run / "figures" / "profiles.png", dpi=(300, 300))
    (run / "figures" / "profiles.svg").write_text('<svg xmlns="http://www.w3.org/2000/svg"/>')
    summary = root / "results" / "summary.tsv"
    stages.summarise_runs(
        [{"run": RUN, "dataset": RUN}, {"run": f"{RUN}.again", "dataset": RUN}],
        [run / "fuzzifier.json"] * 2, [run / "selection.json"] * 2,
        [run / "consensus.npz"] * 2, SETTINGS["genesets"]["thresholds"], summary,
    )  # fmt: skip
    return {"run": run, "summary": summary, "root": root}


@pytest.fixture(scope="module")
def page(run_folder: dict[str, Path]) -> Path:
    run = run_folder["run"]
    return write_run_page(run, run / "report.html", run_name=RUN, settings=SETTINGS)


@pytest.fixture(scope="module")
def memberships(run_folder: dict[str, Path]) -> pd.DataFrame:
    table = pd.read_csv(
        run_folder["run"] / "memberships.tsv", sep="\t", dtype={"gene": str},
        keep_default_na=False, float_precision="round_trip",
    )  # fmt: skip
    assert HOSTILE in set(table["gene"]), "the renamed gene must be clustered for these tests"
    return table


# ------------------------------------------------------------------ reading HTML


class _Node:
    def __init__(self, tag: str, attrs: dict[str, str | None], parent: _Node | None) -> None:
        self.tag, self.attrs, self.parent = tag, attrs, parent
        self.children: list[_Node] = []
        self.text_parts: list[str] = []

    def text(self) -> str:
        return "".join([*self.text_parts, *(child.text() for child in self.children)])

    def walk(self):
        yield self
        for child in self.children:
            yield from child.walk()

    def find_all(self, tag: str | None = None, **attrs: str) -> list[_Node]:
        def matches(node: _Node) -> bool:
            if tag is not None and node.tag != tag:
                return False
            for key, wanted in attrs.items():
                value = node.attrs.get(key.replace("_", "-")) or ""
                if key == "class_":
                    if wanted not in (node.attrs.get("class") or "").split():
                        return False
                elif value != wanted:
                    return False
            return True

        return [node for node in self.walk() if matches(node)]


class _Tree(HTMLParser):
    """A minimal element tree from Python's HTML tokeniser (``html.parser``)."""

    VOID = {"meta", "img", "input", "br", "hr", "link", "source", "col", "wbr"}

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.root = _Node("#document", {}, None)
        self.current = self.root
        self.feed(text)
        self.close()

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        node = _Node(tag, dict(attrs), self.current)
        self.current.children.append(node)
        if tag not in self.VOID:
            self.current = node

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.current.children.append(_Node(tag, dict(attrs), self.current))

    def handle_endtag(self, tag: str) -> None:
        node = self.current
        while node is not None and node.tag != tag:
            node = node.parent
        if node is not None and node.parent is not None:
            self.current = node.parent

    def handle_data(self, data: str) -> None:
        self.current.text_parts.append(data)


def _embedded_json(text: str, data_id: str) -> dict:
    scripts = _Tree(text).root.find_all("script", id=data_id)
    assert len(scripts) == 1, f"one <script id={data_id}> expected"
    return json.loads(scripts[0].text())


def _column(spec: dict, name: str) -> list:
    names = [column["name"] for column in spec["columns"]]
    return spec["data"][names.index(name)]


# ------------------------------------------------------------------ the page as a file


def test_page_fetches_nothing_from_a_network(page: Path) -> None:
    """No element or style rule that would fetch a resource from elsewhere.

    Source: WHATWG HTML (``script src``, ``link href``, ``img src``, ``iframe``, ``object``
    fetch resources) and CSS (``url()`` and ``@import``).
    """
    text = page.read_text(encoding="utf-8")
    assert not re.search(r"""(?:src|href|srcset|data)\s*=\s*["']?\s*(?:https?:)?//""", text)
    assert not re.search(r"""url\(\s*["']?\s*(?:https?:)?//""", text)
    assert "@import" not in text
    tree = _Tree(text).root
    assert tree.find_all("link") == [] and tree.find_all("iframe") == []
    assert all("src" not in node.attrs for node in tree.find_all("script"))
    assert all(node.attrs["src"].startswith("data:image/") for node in tree.find_all("img")), (
        "every image is embedded"
    )


def test_every_figure_is_embedded_byte_for_byte(page: Path, run_folder: dict[str, Path]) -> None:
    """Each PNG of figures/ is in the page as a data: URL that decodes to the same bytes.

    Source: RFC 2397 (``data:[<mediatype>][;base64],<data>``), decoded with Python's base64.
    """
    images = _Tree(page.read_text(encoding="utf-8")).root.find_all("img")
    embedded = [
        base64.b64decode(node.attrs["src"].split(",", 1)[1])
        for node in images
        if node.attrs["src"].startswith("data:image/png;base64,")
    ]
    figures = sorted((run_folder["run"] / "figures").glob("*.png"))
    assert figures, "the fixture writes at least one figure"
    for figure in figures:
        assert figure.read_bytes() in embedded, f"{figure.name} is not embedded"


def test_hostile_gene_name_is_escaped_and_kept(page: Path) -> None:
    """A gene named like markup neither becomes markup nor loses a character.

    Sources: WHATWG HTML 4.12.1.3 (script content must not contain ``</script``);
    Python's ``html.parser`` as the tokeniser and ``json`` as the decoder.
    """
    text = page.read_text(encoding="utf-8")
    assert HOSTILE not in text
    assert "alert(1)" in text, "the gene is on the page, escaped"
    tree = _Tree(text).root
    scripts = tree.find_all("script")
    data_scripts = [node for node in scripts if node.attrs.get("type") == "application/json"]
    assert len(scripts) == len(data_scripts) + 1, "only the page's own script runs"
    genes = _column(_embedded_json(text, "data-memberships"), "gene")
    assert HOSTILE in genes


def test_tables_carry_the_run_values_to_the_display_precision(
    page: Path, memberships: pd.DataFrame
) -> None:
    """Embedded numbers equal the TSV values to DISPLAY_DIGITS significant digits.

    Source: the definition of rounding to d significant digits (relative error at most
    0.5 * 10**(1 - d)); numpy.testing.assert_allclose.
    """
    spec = _embedded_json(page.read_text(encoding="utf-8"), "data-memberships")
    assert spec["n"] == len(memberships)
    assert _column(spec, "gene") == memberships["gene"].tolist()
    for name in ("C1", "C2", "noise", "top_membership", "resampled_top_share"):
        shown = np.array(_column(spec, name), dtype=float)
        np.testing.assert_allclose(
            shown, memberships[name].to_numpy(), rtol=0.5 * 10.0 ** (1 - DISPLAY_DIGITS), atol=0
        )
    assert _column(spec, "top_class") == memberships["top_class"].tolist()


def test_links_are_relative_and_reach_every_run_file(
    page: Path, run_folder: dict[str, Path]
) -> None:
    """Every link is a relative reference to an existing file, and every file is linked.

    Source: RFC 3986 section 4.2 (relative reference: no scheme, no authority) and the run
    folder itself (every non-hidden file).
    """
    tree = _Tree(page.read_text(encoding="utf-8")).root
    targets = set()
    for node in tree.find_all("a"):
        href = node.attrs.get("href") or ""
        if href.startswith("#"):
            continue
        parts = urllib.parse.urlsplit(href)
        assert parts.scheme == "" and parts.netloc == "" and not href.startswith("/"), href
        target = (page.parent / urllib.parse.unquote(parts.path)).resolve()
        assert target.is_file(), href
        targets.add(target)
    run = run_folder["run"]
    files = {
        path.resolve()
        for path in run.rglob("*")
        if path.is_file() and not any(p.startswith(".") for p in path.relative_to(run).parts)
    }
    assert files - {page.resolve()} <= targets


def test_page_sections_come_in_the_issue_order(page: Path) -> None:
    """Decision, figures, tables, lookup, methods, files; with the research-only sentence.

    Source: the order asked for in the project's issue 13 (section 3), read from the page
    with Python's html.parser.
    """
    tree = _Tree(page.read_text(encoding="utf-8")).root
    sections = [node.attrs.get("id") for node in tree.find_all("section")]
    assert sections == ["decision", "figures", "tables", "lookup", "methods", "files"]
    assert RESEARCH_ONLY_NOTE in " ".join(tree.text().split())


def test_decision_names_every_quality_flag_with_its_detail(
    page: Path, run_folder: dict[str, Path]
) -> None:
    """Every flag of selection.json, and its detail, is written in the decision section."""
    selection = json.loads((run_folder["run"] / "selection.json").read_text())
    decision = _Tree(page.read_text(encoding="utf-8")).root.find_all("section", id="decision")
    words = " ".join(decision[0].text().split())
    if not selection["flags"]:
        assert "No quality flag was raised" in words
    for flag in selection["flags"]:
        assert flag in words
        assert selection["flag_details"][flag] in words


def test_methods_paragraph_states_the_runs_settings(run_folder: dict[str, Path]) -> None:
    """m, c, starts, resamples, FDR, seed and versions come from the run's own records.

    Sources: fuzzifier.json and selection.json of the run; the settings written into
    gloam.h5ad by :func:`gloam.stages.export_h5ad`; importlib.metadata for the version;
    the README's reference list (or a library docstring) for the citations.
    """
    run = read_run(run_folder["run"], settings=SETTINGS)
    text = methods_paragraph(run)
    fuzzifier = json.loads((run_folder["run"] / "fuzzifier.json").read_text())
    selection = json.loads((run_folder["run"] / "selection.json").read_text())
    assert f"m = {fuzzifier['m']:.3f}" in text
    assert f"c = {selection['n_clusters']} " in text
    assert f"{SETTINGS['scan']['n_starts']} random starts" in text
    assert f"{SETTINGS['scan']['n_resamples']} resamples" in text
    assert f"FDR of {SETTINGS['preparation']['fdr']:g}" in text
    assert f"seed {SETTINGS['seed']}" in text
    assert f"gloam {metadata.version('gloam')}" in text
    assert f"from {min(SCANNED)} to {max(SCANNED)}" in text
    assert "[not recorded]" not in text
    project = Path(__file__).resolve().parents[1]
    readme = (project / "README.md").read_text(encoding="utf-8")
    listed = readme.split("## References", 1)[1] + "".join(
        path.read_text(encoding="utf-8")
        for path in sorted((project / "src" / "gloam").glob("*.py"))
        if path.name != "report.py"
    )
    references = cited_references(text)
    assert len(references) >= 6
    for reference in references:  # each cited work is one the project itself cites
        authors_and_year = reference.split(").", 1)[0] + ")"
        assert authors_and_year in listed, authors_and_year


def test_methods_paragraph_marks_what_the_run_did_not_record(run_folder: dict[str, Path]) -> None:
    """Without recorded settings, a missing setting is flagged for the reader, never invented."""
    text = methods_paragraph(read_run(run_folder["run"]))
    assert "[not recorded] random starts" in text
    assert f"m = {1.4:.3f}" in text


def test_read_run_refuses_a_folder_without_a_decision(tmp_path: Path) -> None:
    (tmp_path / "fuzzifier.json").write_text("{}")
    with pytest.raises(GloamError, match="selection.json"):
        read_run(tmp_path)
    with pytest.raises(GloamError, match="does not exist"):
        read_run(tmp_path / "missing")


def test_index_page_links_each_run_page(page: Path, run_folder: dict[str, Path]) -> None:
    """The index lists every run of summary.tsv and links the pages it was given, relatively.

    Sources: summary.tsv read with pandas; RFC 3986 relative references.
    """
    index = run_folder["root"] / "index.html"
    write_index_page({RUN: page}, run_folder["summary"], index)
    text = index.read_text(encoding="utf-8")
    spec = _embedded_json(text, "data-summary")
    summary = pd.read_csv(run_folder["summary"], sep="\t", dtype={"run": str})
    assert _column(spec, "run") == summary["run"].tolist()
    links = spec["links"]["run"]
    assert links[1] is None, "a run without a page has no link"
    assert not urllib.parse.urlsplit(links[0]).scheme
    assert (index.parent / urllib.parse.unquote(links[0])).resolve() == page.resolve()
    with pytest.raises(GloamError, match="not in"):
        write_index_page({"other": page}, run_folder["summary"], index)


# ------------------------------------------------------------------ in a browser


def _find_chromium() -> str | None:
    found = shutil.which("chromium")
    if found:
        return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


CHROMIUM = _find_chromium()
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="headless Chromium is not installed (Debian package: chromium)"
)


def _chromium(tmp_path: Path, *arguments: str) -> str:
    command = [
        str(CHROMIUM),
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={tmp_path / 'chromium-profile'}",
        *arguments,
    ]
    done = subprocess.run(command, capture_output=True, text=True, timeout=180, check=False)
    assert done.returncode == 0, done.stderr[-3000:]
    return done.stdout


@needs_chromium
def test_browser_lookup_from_the_address_shows_the_genes_memberships(
    page: Path, memberships: pd.DataFrame, tmp_path: Path
) -> None:
    """``#gene=`` fills the lookup: cluster and memberships as in memberships.tsv.

    Source: the DOM after JavaScript as headless Chromium serialises it (``--dump-dom``),
    read with Python's html.parser.
    """
    row = memberships.loc[memberships["top_class"] != "noise"].iloc[0]
    gene = str(row["gene"])
    dom = _chromium(tmp_path, "--dump-dom", f"{page.as_uri()}#gene={urllib.parse.quote(gene)}")
    tree = _Tree(dom).root
    cards = tree.find_all("div", class_="gene-card")
    assert len(cards) == 1
    assert cards[0].attrs["data-gene"] == gene
    assert cards[0].attrs["data-top-class"] == row["top_class"]
    clusters = [c for c in memberships.columns if re.fullmatch(r"C\d+", c)]
    for name in [*clusters, "noise"]:
        shown = cards[0].find_all("tr", data_class=name)
        assert len(shown) == 1, name
        value = shown[0].find_all("td", class_="membership")[0].text()
        assert value == f"{row[name]:.3f}", name
    intervals = [node.text() for node in cards[0].find_all("td", class_="interval")]
    assert all(re.fullmatch(r"\d\.\d{3} – \d\.\d{3}", text) for text in intervals[:-1])
    assert cards[0].find_all("svg"), "the profile is drawn"
    tables = tree.find_all("div", class_="gtable")
    assert len(tables) == 4
    body = tables[2].find_all("tbody")[0]
    assert len(body.find_all("tr")) == min(100, len(memberships))


@needs_chromium
def test_browser_shows_a_hostile_gene_as_text(page: Path, tmp_path: Path) -> None:
    """Looked up from the address, the markup-like gene name stays text; no script is added.

    Source: WHATWG HTML (``textContent`` sets text, never markup), checked on Chromium's DOM.
    """
    address = f"{page.as_uri()}#gene={urllib.parse.quote(HOSTILE, safe='')}"
    dom = _chromium(tmp_path, "--dump-dom", address)
    tree = _Tree(dom).root
    cards = tree.find_all("div", class_="gene-card")
    assert len(cards) == 1
    assert cards[0].find_all("h3")[0].text() == HOSTILE
    source_scripts = len(_Tree(page.read_text(encoding="utf-8")).root.find_all("script"))
    assert len(tree.find_all("script")) == source_scripts


@needs_chromium
def test_browser_screenshot_is_a_drawn_page(page: Path, tmp_path: Path) -> None:
    """A 1280 x 2000 screenshot is a real picture: many colours, a good share of ink.

    Source: the PNG written by Chromium's ``--screenshot``, read with Pillow.
    """
    from PIL import Image

    shot = tmp_path / "shot.png"
    _chromium(tmp_path, f"--screenshot={shot}", "--window-size=1280,2000", page.as_uri())
    with Image.open(shot) as image:
        assert image.size == (1280, 2000)
        pixels = np.asarray(image.convert("RGB"))
    codes = pixels.astype(np.int64) @ np.array([65536, 256, 1])
    assert np.unique(codes).size > 100
    ink = (pixels.min(axis=2) < 200).mean()
    assert 0.03 < ink < 0.9


# ------------------------------------------------------------------ end to end


def _pipeline_run(root: Path) -> Path:
    """A complete run folder made by the stage functions on a tiny simulated experiment."""
    inputs = root / "input"
    write_demo(inputs, seed=3, n_genes=120, n_replicates=2, times=(0.0, 0.5, 1, 2, 6, 12, 24))
    counts = pd.read_csv(inputs / "counts.tsv", sep="\t", dtype={"gene": str})
    truth = pd.read_csv(inputs / "truth.tsv", sep="\t", dtype={"gene": str})
    planted = truth[~truth["response"].isin(["flat", "unstructured"])]
    strongest = planted.sort_values("amplitude_log2")["gene"].iloc[-1]
    counts["gene"] = counts["gene"].replace({strongest: HOSTILE})
    counts.to_csv(inputs / "counts.tsv", sep="\t", index=False)

    run = root / "results" / RUN
    prepared = run / "prepared"
    stages.run_prepare(
        inputs / "counts.tsv",
        inputs / "samples.tsv",
        {"value_type": "counts", **SETTINGS["preparation"]},  # as the workflow passes them
        h5ad=prepared / "prepared.h5ad",
        zscores=prepared / "zscores.tsv",
        gene_report=prepared / "gene_report.tsv",
        summary=prepared / "summary.tsv",
    )
    zscores, columns = read_prepared(prepared / "prepared.h5ad")
    replicates, samples = read_prepared_replicates(prepared / "prepared.h5ad")
    m = stages.write_fuzzifier_choice(
        zscores, SETTINGS["fuzzifier"], SETTINGS["seed"], run / "fuzzifier.json",
        run / "fuzzifier_curve.tsv",
    )  # fmt: skip
    stages.write_scan_input(
        zscores, m, prepared / "scan_input.npz", columns=columns, replicates=replicates,
        samples=samples, selection_method="moderated_f",
    )  # fmt: skip
    scan_settings = {
        key: SETTINGS["scan"][key] for key in stages.SCAN_SETTINGS if key in SETTINGS["scan"]
    }
    scans = [run / "scan" / f"c{c}.npz" for c in SCANNED]
    for c, path in zip(SCANNED, scans, strict=True):
        stages.run_scan(prepared / "scan_input.npz", c, scan_settings, SETTINGS["seed"], path)
    with warnings.catch_warnings():  # quality flags of tiny data are expected here
        warnings.simplefilter("ignore")
        stages.run_select(
            prepared / "scan_input.npz", run / "fuzzifier.json", scans, SETTINGS["selection"],
            SETTINGS["seed"], out_validity=run / "validity.tsv",
            out_selection=run / "selection.json", out_consensus=run / "consensus.npz",
        )  # fmt: skip
    stages.export_tables(
        run / "consensus.npz", out_memberships=run / "memberships.tsv",
        out_centroids=run / "centroids.tsv", out_clusters=run / "clusters.tsv",
        out_robustness=run / "robustness.tsv",
    )  # fmt: skip
    stages.export_h5ad(
        prepared / "prepared.h5ad", run / "consensus.npz", run / "fuzzifier.json",
        run / "selection.json", SETTINGS, run / "gloam.h5ad",
    )  # fmt: skip
    stages.export_gene_sets(
        run / "consensus.npz", SETTINGS["genesets"]["thresholds"], run / "genesets", prefix=RUN
    )
    figures = tuple(run / "figures" / f"fuzzifier.{suffix}" for suffix in ("png", "pdf", "svg"))
    files = {
        "fuzzifier.json": run / "fuzzifier.json",
        "fuzzifier_curve.tsv": run / "fuzzifier_curve.tsv",
    }
    stages.figure_fuzzifier(files, {"time_unit": "h"}, figures)
    return run


@pytest.mark.slow
def test_page_from_a_real_pipeline_run(tmp_path: Path) -> None:
    """A run made by the stage functions gives a page with its records, figures and genes.

    Sources: fuzzifier.json, selection.json and memberships.tsv of that run; the settings
    and versions recorded in its gloam.h5ad (:func:`gloam.stages.export_h5ad`);
    importlib.metadata; RFC 2397 for the embedded figure; headless Chromium for the lookup.
    """
    run = _pipeline_run(tmp_path)
    page = write_run_page(run, run / "report.html")
    text = page.read_text(encoding="utf-8")
    fuzzifier = json.loads((run / "fuzzifier.json").read_text())
    selection = json.loads((run / "selection.json").read_text())
    methods = methods_paragraph(read_run(run))  # settings from gloam.h5ad only
    assert f"m = {fuzzifier['m']:.3f}" in methods
    assert f"c = {selection['n_clusters']} " in methods
    assert f"{SETTINGS['scan']['n_starts']} random starts" in methods
    assert f"seed {SETTINGS['seed']}" in methods
    assert f"gloam {metadata.version('gloam')}" in methods
    assert "[not recorded]" not in methods
    figure = (run / "figures" / "fuzzifier.png").read_bytes()
    assert base64.b64encode(figure).decode("ascii") in text
    genes = _column(_embedded_json(text, "data-memberships"), "gene")
    assert HOSTILE in genes and HOSTILE not in text
    if CHROMIUM is not None:
        dom = _chromium(tmp_path, "--dump-dom", f"{page.as_uri()}#gene={genes[0]}")
        cards = _Tree(dom).root.find_all("div", class_="gene-card")
        assert [card.attrs["data-gene"] for card in cards] == [genes[0]]
