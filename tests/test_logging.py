"""The rule logs tell the story: what each stage read, kept and chose, and its warnings.

A small stage chain runs in process, each stage inside :func:`gloam.stages.rule_environment`
as the workflow's rule scripts run it, on a simulated experiment (three planted responses,
:func:`gloam.simulate.simulate_experiment`). Every number in a log is checked against the
files the stages wrote, read back here with pandas, numpy and json.
"""

from __future__ import annotations

import io
import json
import logging
import math
import re
import warnings
from pathlib import Path

import pandas as pd
import pytest

from gloam import logs, stages
from gloam.errors import GloamError, GloamWarning
from gloam.simulate import simulate_experiment

SCANNED = (2, 3, 4)
THRESHOLDS = (0.5, 0.7)
SCAN_SETTINGS = {
    "n_starts": 4,
    "tol": 1e-4,
    "max_iter": 200,
    "init": "kmeans++",
    "precision": "fast",
    "n_resamples": 5,
}
SELECTION = {"structure_n_null": 10}

#: A line of a log file: Python logging's default ``asctime`` (``2024-05-01 13:45:07,123``),
#: the level name, the logger name and the message (LogRecord attributes, Python docs).
LINE = re.compile(
    r"^\d{4}-\d\d-\d\d \d\d:\d\d:\d\d,\d{3} (?P<level>[A-Z]+) (?P<logger>[\w.]+): (?P<message>.*)$"
)


def _records(log: Path) -> list[tuple[str, str, str]]:
    """(level, logger, message) of every line; fails on a line that is not a record."""
    records = []
    for line in log.read_text(encoding="utf-8").splitlines():
        match = LINE.match(line)
        assert match, f"not a log record: {line!r}"
        records.append((match["level"], match["logger"], match["message"]))
    return records


def _messages(log: Path, level: str = "INFO") -> list[str]:
    return [message for lvl, _, message in _records(log) if lvl == level]


def _one(messages: list[str], pattern: str) -> re.Match[str]:
    found = [match for text in messages if (match := re.search(pattern, text))]
    assert len(found) == 1, (pattern, messages)
    return found[0]


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> dict[str, Path]:
    """The chain prepare -> scan (c = 2, 3, 4) -> select -> gene sets -> summary, each stage
    logged to its own file as in the workflow."""
    root = tmp_path_factory.mktemp("run")
    data = simulate_experiment(
        n_genes=240, n_responses=3, flat_share=0.25, n_replicates=3, seed=4
    ).write(root / "data")
    logs_dir = root / "logs"
    files = {
        "matrix": data["matrix"],
        "samples": data["samples"],
        "prepared": root / "prepared.h5ad",
        "gene_report": root / "gene_report.tsv",
        "fuzzifier": root / "fuzzifier.json",
        "curve": root / "fuzzifier_curve.tsv",
        "scan_input": root / "scan_input.npz",
        "validity": root / "validity.tsv",
        "selection": root / "selection.json",
        "consensus": root / "consensus.npz",
        "genesets": root / "genesets",
        "summary": root / "summary.tsv",
        "logs": logs_dir,
    }
    with stages.rule_environment(
        logs_dir / "prepare.log", 1, inputs=[data["matrix"], data["samples"]]
    ):
        prepared = stages.run_prepare(
            data["matrix"],
            data["samples"],
            {"value_type": "counts"},
            h5ad=files["prepared"],
            zscores=root / "zscores.tsv",
            gene_report=files["gene_report"],
            summary=root / "prepare_summary.tsv",
        )
        m = stages.write_fuzzifier_choice(
            prepared.zscores, {"m": "auto", "n_clusters_check": 4}, 1, files["fuzzifier"],
            files["curve"],
        )  # fmt: skip
        stages.write_scan_input(
            prepared.zscores, m, files["scan_input"], columns=prepared.columns,
            replicates=prepared.replicates, samples=prepared.samples,
            selection_method=prepared.selection_method,
        )  # fmt: skip
    scans = [root / "scan" / f"c{c}.npz" for c in SCANNED]
    for c, path in zip(SCANNED, scans, strict=True):
        with stages.rule_environment(logs_dir / f"scan_c{c}.log", 1, outputs=[path]):
            stages.run_scan(files["scan_input"], c, SCAN_SETTINGS, 1, path)
    with stages.rule_environment(logs_dir / "select.log", 1):
        stages.run_select(
            files["scan_input"], files["fuzzifier"], scans, SELECTION, 1,
            out_validity=files["validity"], out_selection=files["selection"],
            out_consensus=files["consensus"],
        )  # fmt: skip
    with stages.rule_environment(logs_dir / "core_genes.log", 1, outputs=[files["genesets"]]):
        stages.export_gene_sets(files["consensus"], THRESHOLDS, files["genesets"], prefix="sim")
    with stages.rule_environment(logs_dir / "summary.log", 1):
        stages.summarise_runs(
            [{"run": "sim", "dataset": "sim"}], [files["fuzzifier"]], [files["selection"]],
            [files["consensus"]], THRESHOLDS, files["summary"],
        )  # fmt: skip
    files["scans"] = root / "scan"
    return files


def test_every_log_line_has_time_level_logger_and_message(run):
    """Format with time, level, logger and message (Python logging's LogRecord attributes);
    each job opens with gloam's version and thread cap and closes with its wall time."""
    for log in sorted(run["logs"].glob("*.log")):
        records = _records(log)
        assert records[0][2].startswith("gloam ") and "1 thread(s)" in records[0][2], log
        assert re.fullmatch(r"done in \d+\.\d s", records[-1][2]), log
        assert {logger for _, logger, _ in records} <= {"gloam.stages", logs.WARNINGS_LOGGER}


def test_prepare_log_gives_the_genes_read_and_kept_as_in_the_files(run):
    """Counts against the input matrix and the gene report (``status``: kept or the drop
    reason, one row per input gene), both read back with pandas."""
    messages = _messages(run["logs"] / "prepare.log")
    matrix = pd.read_csv(run["matrix"], sep="\t", index_col=0)
    read = _one(messages, r"^read (\S+): (\d+) genes x (\d+) samples")
    assert Path(read[1]) == run["matrix"]
    assert (int(read[2]), int(read[3])) == matrix.shape
    report = pd.read_csv(run["gene_report"], sep="\t")
    status = report["status"].value_counts()
    kept = _one(messages, r"^kept (\d+) of (\d+) genes \(dropped: (.*?)\);")
    assert int(kept[1]) == status["kept"] and int(kept[2]) == len(matrix)
    dropped = dict(item.rsplit(" ", 1) for item in kept[3].split(", ")) if kept[3] != "none" else {}
    assert {reason: int(n) for reason, n in dropped.items()} == {
        reason: int(n) for reason, n in status.items() if reason != "kept"
    }


def test_prepare_log_gives_the_fuzzifier_as_in_fuzzifier_json(run):
    """m, its method and the shuffled-data check as written; the formula's value checked
    against Schwaemmle & Jensen (2010, Bioinformatics 26:2841), formula typed from memory."""
    messages = _messages(run["logs"] / "prepare.log")
    choice = json.loads(run["fuzzifier"].read_text(encoding="utf-8"))
    line = _one(
        messages,
        r"^fuzzifier m = ([\d.]+) \(setting '(\w+)', method (\w+); the formula gives ([\d.]+) "
        r"for (\d+) genes x (\d+) columns\); shuffled-data check at c = (\d+): .* (passed|FAILED)",
    )
    assert float(line[1]) == pytest.approx(choice["m"], abs=5e-4)
    assert (line[2], line[3]) == (choice["setting"], choice["method"])
    n, d = int(line[5]), int(line[6])
    assert (n, d) == (choice["n_genes"], choice["n_columns"])
    published = (
        1 + (1418 / n + 22.05) * d**-2 + (12.33 / n + 0.243) * d ** (-0.0406 * math.log(n) - 0.1134)
    )
    assert float(line[4]) == pytest.approx(published, abs=5e-4)
    assert int(line[7]) == choice["n_clusters_check"]
    assert (line[8] == "passed") == choice["check_passed"]


def test_scan_logs_give_starts_objective_and_resamples_as_in_the_scan_files(run):
    """Per c: starts, starts at the best objective, the objective, unconverged starts and
    resamples, against the scan file's metrics and its Jaccard table (one row per resample)."""
    for c in SCANNED:
        messages = _messages(run["logs"] / f"scan_c{c}.log")
        scan = stages.read_scan(run["scans"] / f"c{c}.npz")
        metrics = scan["metrics"]
        line = _one(
            messages,
            rf"^scan c = {c}: (\d+) starts, (\d+) at the best objective ([^,\s]+), (\d+) not "
            r"converged within (\d+) iterations; (\d+) resamples \((\w+)\); [\d.]+ s$",
        )
        assert int(line[1]) == metrics["n_starts"] and int(line[2]) == metrics["n_at_optimum"]
        assert float(line[3]) == pytest.approx(metrics["objective"], rel=1e-5)
        assert int(line[4]) == metrics["n_not_converged"]
        assert int(line[5]) == SCAN_SETTINGS["max_iter"]
        assert int(line[6]) == scan["jaccard"].shape[0] == SCAN_SETTINGS["n_resamples"]
        assert line[7] == metrics["resampling"]


def test_select_log_gives_the_criteria_per_c_and_the_c_of_selection_json(run):
    """The verdict on every scanned c as in validity.tsv (``failed``), and the chosen c, the
    recommendation and the flags as in selection.json."""
    messages = _messages(run["logs"] / "select.log")
    selection = json.loads(run["selection"].read_text(encoding="utf-8"))
    validity = pd.read_csv(run["validity"], sep="\t", keep_default_na=False)
    for row in validity.to_dict("records"):
        verdict = _one(messages, rf"^c = {row['n_clusters']}: (passes|fails (\S+)) \(")
        assert (verdict[1] == "passes") == (row["passes"] in (True, "True"))
        assert (verdict[2] or "") == row["failed"]
    chosen = _one(messages, r"^chosen c = (\d+) \((\w+); recommended (\d+)\): .*; flags: (.*)$")
    assert int(chosen[1]) == selection["n_clusters"]
    assert chosen[2] == selection["method"]
    assert int(chosen[3]) == selection["recommended"]
    assert chosen[4] == (", ".join(selection["flags"]) or "none")
    structure = _one(messages, r"^structure test: p = (\S+) at level (\S+), structure (\w+)$")
    assert float(structure[1]) == pytest.approx(selection["structure"]["p_value"], rel=1e-2)
    assert (structure[3] == "present") == selection["structure"]["present"]


def test_core_gene_log_counts_the_genes_in_each_written_list(run):
    """Core genes per cluster and threshold against the line counts of the written lists."""
    messages = _messages(run["logs"] / "core_genes.log")
    for threshold in THRESHOLDS:
        line = _one(
            messages, rf"^core genes at membership >= {threshold:g}: (\d+) of \d+ genes \((.*)\)$"
        )
        logged = {name: int(n) for name, n in (item.split(" ") for item in line[2].split(", "))}
        lists = sorted(run["genesets"].glob(f"sim_*_core{threshold:g}.txt"))
        genes = {
            path.name.split("_")[1]: path.read_text(encoding="utf-8").split() for path in lists
        }
        assert logged == {name: len(members) for name, members in genes.items()}
        assert int(line[1]) == len(set().union(*genes.values()))


def test_run_lines_give_one_line_per_summary_row_with_its_m_c_and_flags(run, tmp_path):
    """Two runs, one with flags written into its selection: each line carries the values of
    its own summary.tsv row (read back with pandas); the summary job logs the same lines."""
    flagged = json.loads(run["selection"].read_text(encoding="utf-8"))
    flagged["flags"] = ["c_at_scan_edge", "mostly_noise"]
    flagged["method"] = "fixed"
    other = tmp_path / "selection.json"
    other.write_text(json.dumps(flagged), encoding="utf-8")
    summary = tmp_path / "summary.tsv"
    log = tmp_path / "summary.log"
    with stages.rule_environment(log, 1):
        stages.summarise_runs(
            [{"run": "first", "dataset": "d"}, {"run": "second", "dataset": "d"}],
            [run["fuzzifier"]] * 2, [run["selection"], other], [run["consensus"]] * 2,
            THRESHOLDS, summary,
        )  # fmt: skip
    lines = stages.run_lines(summary)
    table = pd.read_csv(summary, sep="\t", keep_default_na=False)
    assert len(lines) == len(table) == 2
    pattern = re.compile(
        r"^run (\S+): m = ([\d.]+) \((\w+)\), c = (\d+) \((\w+), recommended (\d+)\), (\d+) "
        r"genes of which (\d+) noise, flags: (.*)$"
    )
    for line, row in zip(lines, table.to_dict("records"), strict=True):
        found = pattern.match(line)
        assert found, line
        assert found[1] == row["run"]
        assert float(found[2]) == pytest.approx(row["m"], abs=5e-4) and found[3] == row["m_method"]
        assert int(found[4]) == row["n_clusters"] and found[5] == row["n_clusters_method"]
        assert int(found[6]) == row["recommended_n_clusters"]
        assert (int(found[7]), int(found[8])) == (row["n_genes_clustered"], row["n_noise"])
        assert found[9].split(", ") == (row["flags"].split(",") if row["flags"] else ["none"])
    assert lines[1].endswith("flags: c_at_scan_edge, mostly_noise")
    assert [m for m in _messages(log) if m.startswith("run ")] == lines
    assert _messages(run["logs"] / "summary.log")[1:-1] == stages.run_lines(run["summary"])


def test_run_lines_refuse_a_table_that_is_not_a_run_summary(tmp_path):
    table = tmp_path / "summary.tsv"
    pd.DataFrame({"run": ["a"], "m": [1.2]}).to_csv(table, sep="\t", index=False)
    with pytest.raises(GloamError, match=r"lacks the column\(s\) \['n_genes_clustered'"):
        stages.run_lines(table)
    with pytest.raises(GloamError, match="cannot be read"):
        stages.run_lines(tmp_path / "missing.tsv")


def test_a_quality_flag_raised_in_the_selection_lands_in_the_log_with_its_c(run, tmp_path, capsys):
    """A fixed c with an unreachable core-gene minimum must raise near_empty_clusters for
    that c: a WARNING record in the log, one ``gloam: warning:`` line on the terminal."""
    c = SCANNED[0]
    log = tmp_path / "select.log"
    with stages.rule_environment(log, 1):
        stages.run_select(
            run["scan_input"], run["fuzzifier"], sorted(run["scans"].glob("c*.npz")),
            {**SELECTION, "n_clusters": c, "min_core_genes": 10**6}, 1,
            out_validity=tmp_path / "validity.tsv", out_selection=tmp_path / "selection.json",
            out_consensus=tmp_path / "consensus.npz",
        )  # fmt: skip
    selection = json.loads((tmp_path / "selection.json").read_text(encoding="utf-8"))
    assert "near_empty_clusters" in selection["flags"]
    warned = [m for level, logger, m in _records(log) if level == "WARNING"]
    (line,) = [m for m in warned if "near_empty_clusters" in m]
    assert re.search(rf"quality flag near_empty_clusters: c = {c}: smallest cluster", line)
    terminal = capsys.readouterr().err.splitlines()
    assert f"gloam: warning: {line}" in terminal


def test_a_gloam_warning_inside_a_subject_names_it_once(tmp_path):
    """Warnings go to the logger ``py.warnings`` (the name logging.captureWarnings uses,
    Python docs), one line each; gloam's own get the subject, others their location."""
    log = tmp_path / "job.log"
    with logs.log_to_file(log, stream=io.StringIO()), warnings.catch_warnings():
        warnings.simplefilter("always")
        with logs.about("c = 7"):
            warnings.warn("only 1 of 20 starts\nreached the optimum", GloamWarning, stacklevel=1)
            warnings.warn("c = 7: already named", GloamWarning, stacklevel=1)
            warnings.warn("a library's own note", UserWarning, stacklevel=1)
        warnings.warn("no subject here", GloamWarning, stacklevel=1)
    records = _records(log)
    assert [(level, logger) for level, logger, _ in records] == [("WARNING", "py.warnings")] * 4
    messages = [message for _, _, message in records]
    assert messages[0] == "c = 7: only 1 of 20 starts reached the optimum"
    assert messages[1] == "c = 7: already named"
    assert messages[2].startswith(f"UserWarning: a library's own note ({__file__}:")
    assert messages[3] == "no subject here"


def test_rule_environment_leaves_logging_as_it_found_it(tmp_path):
    """A library must not configure logging for its host (Python Logging HOWTO, "Configuring
    Logging for a Library"): handlers, the gloam level and the warning hook are restored, and
    records after the job do not reach its log."""
    root = logging.getLogger()
    package = logging.getLogger("gloam")
    before = (list(root.handlers), package.level, warnings.showwarning)
    log = tmp_path / "job.log"
    with stages.rule_environment(log, 1):
        assert package.getEffectiveLevel() == logging.INFO
    assert (list(root.handlers), package.level, warnings.showwarning) == before
    size = log.stat().st_size
    logging.getLogger("gloam.stages").warning("after the job")
    assert log.stat().st_size == size


def test_a_user_error_is_one_line_in_the_log_and_on_the_terminal(run, tmp_path, capsys):
    """A GloamError ends the job with status 2 and one line, no traceback (common practice
    for command-line tools: user mistakes are not crashes)."""
    log = tmp_path / "scan.log"
    n_genes = len(stages.read_scan_input(run["scan_input"]).zscores)
    with pytest.raises(SystemExit) as stop, stages.rule_environment(log, 1):
        stages.run_scan(run["scan_input"], n_genes, SCAN_SETTINGS, 1, tmp_path / "c.npz")
    assert stop.value.code == 2
    errors = [(logger, m) for level, logger, m in _records(log) if level == "ERROR"]
    assert len(errors) == 1 and errors[0][1].startswith(f"gloam: error: c = {n_genes} needs")
    assert "Traceback" not in log.read_text(encoding="utf-8")
    assert capsys.readouterr().err.strip() == errors[0][1]


def test_console_logging_shows_scan_progress_and_details_only_when_verbose(run, tmp_path):
    """``gloam cluster``'s progress: one line per c with its place in the scan; the details
    of each c only when verbose. Afterwards the root logger is as before."""
    quiet, verbose = io.StringIO(), io.StringIO()
    handlers = list(logging.getLogger().handlers)
    settings = {**SCAN_SETTINGS, "n_resamples": 0}
    with (
        logs.console_logging(False, stream=quiet),
        logs.console_logging(True, stream=verbose),
        logs.progress(2, 3),
    ):
        stages.run_scan(run["scan_input"], 3, settings, 1, tmp_path / "c3.npz")
    assert logging.getLogger().handlers == handlers
    metrics = stages.read_scan(tmp_path / "c3.npz")["metrics"]
    progress = f"gloam: scan c = 3 (2 of 3): {metrics['n_starts']} starts, "
    for stream, n_details in ((quiet, 0), (verbose, 1)):
        lines = stream.getvalue().splitlines()
        assert sum(line.startswith(progress) for line in lines) == 1, lines
        assert sum("smallest cluster" in line for line in lines) == n_details, lines
        assert all(line.startswith("gloam: ") for line in lines)


def test_summary_of_no_run_gives_no_line(tmp_path):
    table = tmp_path / "summary.tsv"
    pd.DataFrame(columns=list(stages.RUN_LINE_COLUMNS)).to_csv(table, sep="\t", index=False)
    assert stages.run_lines(table) == []
