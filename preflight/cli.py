"""Command line: a thin layer over :func:`preflight.check`.

Exit codes (DESIGN.md): 0 the conclusion meets --require; 1 the data support
only a weaker conclusion; 2 usage or input error; 3 internal error; 130 and
143 interrupted by SIGINT and SIGTERM.
"""

from __future__ import annotations

import functools
import os
import sys
from typing import Any

import click

from preflight._version import __version__
from preflight.errors import InputError
from preflight.policy import CORRECTIONS, LEVELS, Policy

EXIT_PASS, EXIT_WEAKER, EXIT_INPUT, EXIT_INTERNAL = 0, 1, 2, 3


@functools.cache
def _bar_class():
    from tqdm import tqdm

    class Bar(tqdm):
        # No monitor thread: worker processes are forked while a bar is open.
        monitor_interval = 0

    return Bar


def _terminal_columns(stream) -> int | None:
    try:
        return os.get_terminal_size(stream.fileno()).columns
    except (AttributeError, OSError, ValueError):
        return None


class _Progress:
    """A progress bar on stderr (tqdm) for the stage at work, only when stderr is a terminal.

    Each stage gets its own bar: stage name, bar, count, elapsed and the
    estimated time left.  The stages count their own units (candidate pairs
    scored, variables, pairs), so the estimate follows the work.  ``close``
    clears the line; call it however the run ends.  tqdm is imported only
    when a bar is shown, so redirected and ``--quiet`` runs never load it.
    """

    FORMAT = "{desc}: {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} [{elapsed}<{remaining}]"

    def __init__(self, enabled: bool, stream=None):
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = enabled and self.stream.isatty()
        self.bar: Any = None  # a tqdm bar once drawn (tqdm ships no type information)
        self.stage: str | None = None

    def __call__(self, stage: str, done: int, total: int) -> None:
        if not self.enabled:
            return
        if self.bar is None or stage != self.stage:
            self.close()
            # The terminal's width (80 when it reports none), less three columns so
            # that the "^C" a terminal echoes on Ctrl-C stays on the bar's line
            # and is erased with it.
            width = _terminal_columns(self.stream)
            self.bar = _bar_class()(total=max(total, 1), desc=stage, file=self.stream, leave=False,
                                    bar_format=self.FORMAT, mininterval=0.2,
                                    ncols=None if width is None else max(20, (width or 80) - 3))
            self.stage = stage
        if total != self.bar.total and total > 0:
            self.bar.total = total
        if done > self.bar.n:
            self.bar.update(done - self.bar.n)
        if done >= total:
            self.bar.refresh()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.stream.write("\r\033[K")  # erase the whole line, an echoed "^C" included
            self.stream.flush()
            self.bar = None
            self.stage = None


def _use_colour(no_color: bool) -> bool:
    return not no_color and "NO_COLOR" not in os.environ and sys.stdout.isatty()


def _split(values: tuple[str, ...] | None) -> list[str] | None:
    if not values:
        return None
    out: list[str] = []
    for value in values:
        out += [v.strip() for v in value.split(",") if v.strip()]
    return out


DEFAULTS = Policy()
"""The defaults the help texts show: read from the policy, so they cannot drift from it."""


def _settings(set_pairs: tuple[str, ...], **named) -> dict:
    settings = {k: v for k, v in named.items() if v is not None}
    for item in set_pairs:
        if "=" not in item:
            raise InputError(f"--set takes KEY=VALUE, got {item!r}")
        key, value = item.split("=", 1)
        settings[key.strip().replace("-", "_")] = value.strip()
    return settings


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, "--version", prog_name="preflight", message="%(prog)s %(version)s")
def cli() -> None:
    """Decide, before causal discovery, whether the direction of causal effects
    can be identified from your observational data, and how far.

    Run `preflight demo` for a worked example, `preflight check DATA` on your
    own table.
    """


def _plan_outputs(inputs, json_path=None, markdown_path=None, html_path=None, junit_path=None, graph_path=None):
    """Every output checked before any computation (see preflight.outputs)."""
    from preflight.outputs import plan_outputs

    return plan_outputs([("--json", json_path), ("--markdown", markdown_path), ("--html", html_path),
                         ("--junit", junit_path), ("--graph-out", graph_path)], inputs)


def _render_outputs(report, targets) -> list:
    """Every report rendered in memory first, so a failure leaves no file behind."""
    rendered = []
    for target in targets:
        if target.option == "--json":
            text = report.to_json()
        elif target.option == "--markdown":
            from preflight.report.markdown import render_markdown

            text = render_markdown(report)
        elif target.option == "--html":
            from preflight.report.html import render_html

            text = render_html(report)
        elif target.option == "--junit":
            from preflight.report.junit import render_junit

            text = render_junit(report.data)
        else:
            from preflight.report.discovery import graph_format, render_graph

            text = render_graph(report.data, graph_format(target.path))
        rendered.append((target, text))
    return rendered


def _write_all(rendered) -> None:
    from preflight.outputs import write_outputs

    write_outputs(rendered)


def _print_warnings(report, quiet: bool) -> None:
    """What the input lost (skipped columns, stray cells, dropped rows), on stderr as well as in the report."""
    from preflight.report.text import visible

    if quiet:
        return
    for warning in report.data["input"].get("warnings") or []:
        click.echo(f"preflight: warning: {visible(warning)}", err=True)


def _echo_summary(text_of_style, no_color: bool, targets=()) -> None:
    """Print a terminal summary, on stderr (and without colour) when a report itself goes to standard output.

    ``text_of_style`` renders the summary given a styling function or None.
    """
    to_stderr = any(t.kind == "stdout" for t in targets)
    style = click.style if _use_colour(no_color) and not to_stderr else None
    click.echo(text_of_style(style), nl=False, err=to_stderr)


def _print_summary(report, quiet: bool, no_color: bool, targets=()) -> None:
    from preflight.report.text import render_text

    _echo_summary(lambda style: render_text(report.data, style=style, quiet=quiet), no_color, targets)


def _graph_path_checked(ctx, param, value):
    """Refuse an unknown graph extension before any work is done."""
    if value:
        from preflight.report.discovery import graph_format

        try:
            graph_format(value)
        except InputError as exc:
            raise click.BadParameter(str(exc)) from None
    return value


output_options = [
    click.option("--json", "json_path", metavar="PATH",
                 help="Write the JSON report (schema version 1) here; - for standard output."),
    click.option("--markdown", "markdown_path", metavar="PATH", help="Write a Markdown report for a study appendix."),
    click.option("--html", "html_path", metavar="PATH", help="Write a self-contained HTML report with plots."),
    click.option("--junit", "junit_path", metavar="PATH", help="Write every check as a JUnit XML test case."),
    click.option("--graph-out", "graph_path", metavar="PATH", callback=_graph_path_checked,
                 help="Write the justified graph and the discovery step's background knowledge: "
                      ".dot (Graphviz), .graphml or .json (node-link)."),
    click.option("--quiet", "-q", is_flag=True, help="Print only the conclusion line; no progress."),
    click.option("--no-color", is_flag=True, help="No colour on the terminal (NO_COLOR is honoured too)."),
]


def _with(options):
    def decorate(func):
        for option in reversed(options):
            func = option(func)
        return func
    return decorate


@cli.command("check")
@click.argument("data", metavar="DATA")
@click.option("--sep", metavar="CHAR", help="Field separator (default: tab for .tsv/.tab, else comma).")
@click.option("--columns", multiple=True, metavar="A,B,...", help="Analyse only these columns.")
@click.option("--exclude", multiple=True, metavar="A,B,...", help="Leave these columns out.")
@click.option("--missing", type=click.Choice(["drop", "error"]), default="drop", show_default=True,
              help="Rows with missing values: drop and count them, or refuse the file.")
@click.option("--graph", metavar="FILE", help="A hypothesised DAG: CSV with source,target or lines 'a -> b'.")
@click.option("--require", type=click.Choice(LEVELS), help=f"Rung the gate asks for [default: {DEFAULTS.require}].")
@click.option("--fail-on", multiple=True, metavar="FLAG,...", help="Also fail the gate when any of these flags is raised.")
@click.option("--alpha", type=float,
              help=f"Significance level after multiplicity correction [default: {DEFAULTS.alpha:g}].")
@click.option("--correction", type=click.Choice(CORRECTIONS),
              help=f"Multiplicity correction [default: {DEFAULTS.correction}].")
@click.option("--seed", type=int,
              help=f"Seed of every random choice; same data and seed give the same report [default: {DEFAULTS.seed}].")
@click.option("--min-rows", type=int, help=f"Fewest usable rows for any conclusion [default: {DEFAULTS.min_rows}].")
@click.option("--rows-unordered", is_flag=True, default=None, help="Row order carries no meaning: skip the autocorrelation screen.")
@click.option("--jobs", "-j", type=int, help="Worker processes for the pair battery; 0 or unset: every core available, more are capped to it.")
@click.option("--policy", "policy_file", metavar="FILE", help="TOML file of policy settings (see `preflight policy`).")
@click.option("--set", "set_pairs", multiple=True, metavar="KEY=VALUE", help="Set any policy key, e.g. --set hsic_max_n=5000.")
@_with(output_options)
def check_command(data, sep, columns, exclude, missing, graph, require, fail_on, alpha, correction, seed,
                  min_rows, rows_unordered, jobs, policy_file, set_pairs, json_path, markdown_path, html_path,
                  junit_path, graph_path, quiet, no_color):
    """Check DATA (CSV, TSV, Parquet, or - for CSV on stdin) and gate on the conclusion."""
    from preflight.api import check
    from preflight.policy import build_policy

    fail = _split(fail_on)
    overrides = _settings(set_pairs, require=require, alpha=alpha, correction=correction, seed=seed,
                          min_rows=min_rows, rows_unordered=rows_unordered, jobs=jobs,
                          fail_on=",".join(fail) if fail else None)
    policy, _ = build_policy(overrides, policy_file=policy_file)
    targets = _plan_outputs([data, graph, policy_file], json_path, markdown_path, html_path, junit_path,
                           graph_path)
    progress = _Progress(enabled=not quiet)
    try:
        report = check(data, sep=sep, columns=_split(columns), exclude=_split(exclude), missing=missing,
                       graph=graph, policy=policy, progress=progress,
                       keep_samples=html_path is not None)
    finally:
        progress.close()
    _write_all(_render_outputs(report, targets))
    _print_warnings(report, quiet)
    from preflight.pipeline import jobs_note

    note = None if quiet else jobs_note(policy)
    if note:  # after the run, so a refused input still gets one line
        click.echo(f"preflight: note: {note}", err=True)
    _print_summary(report, quiet, no_color, targets)
    sys.exit(EXIT_PASS if report.passed else EXIT_WEAKER)


@cli.command("demo")
@click.option("--out", "out_dir", default="preflight-demo", show_default=True, metavar="DIR",
              help="Folder for the demo data and reports.")
@click.option("--rows", type=int, default=2000, show_default=True, help="Rows to simulate.")
@click.option("--seed", type=int, default=None, help="Seed of the analysis.")
@click.option("--quiet", "-q", is_flag=True, help="Print only the conclusion line.")
@click.option("--no-color", is_flag=True, help="No colour on the terminal.")
def demo_command(out_dir, rows, seed, quiet, no_color):
    """Simulate an invented kiln firing record with a known structure and check it.

    Writes kiln.csv and the reports (JSON, Markdown, HTML, JUnit) to DIR. The
    true structure is documented in preflight/demo.py. Exits 0 when the demo
    ran, whatever its conclusion (which the summary shows).
    """
    from preflight.api import check
    from preflight.demo import EXPECTED_LEVEL, write_demo_csv
    from preflight.policy import build_policy

    if rows < 10:
        raise InputError("--rows must be at least 10")
    try:
        os.makedirs(out_dir, exist_ok=True)
        data_path = write_demo_csv(os.path.join(out_dir, "kiln.csv"), n=rows)
    except OSError as exc:
        raise InputError(f"cannot write the demo to {out_dir}: {exc.strerror or exc}") from None
    policy, _ = build_policy({"seed": seed} if seed is not None else {})
    names = {"json": "kiln-report.json", "markdown": "kiln-report.md", "html": "kiln-report.html",
             "junit": "kiln-checks.xml"}
    paths = {k: os.path.join(out_dir, v) for k, v in names.items()}
    targets = _plan_outputs([data_path], paths["json"], paths["markdown"], paths["html"], paths["junit"])
    progress = _Progress(enabled=not quiet)
    try:
        report = check(data_path, policy=policy, progress=progress)
    finally:
        progress.close()
    _write_all(_render_outputs(report, targets))
    _print_summary(report, quiet, no_color)
    if not quiet:
        click.echo("")
        click.echo(f"The kiln's true structure is documented in preflight/demo.py; the honest answer is {EXPECTED_LEVEL}.")
        click.echo(f"Data:    {data_path}")
        for key in ("json", "markdown", "html", "junit"):
            click.echo(f"{key.capitalize() + ':':8} {paths[key]}")
        click.echo(f"`preflight check {data_path}` would exit {EXIT_PASS if report.passed else EXIT_WEAKER} "
                   f"(required: {report.conclusion['required']}).")


@cli.command("report")
@click.argument("report_json", metavar="REPORT.json")
@_with(output_options[1:])
def report_command(report_json, markdown_path, html_path, junit_path, graph_path, quiet, no_color):
    """Render a saved JSON report again (Markdown, HTML, JUnit, graph) without the data."""
    from preflight.report.json import read_report
    from preflight.report.model import Report

    targets = _plan_outputs([report_json], None, markdown_path, html_path, junit_path, graph_path)
    report = Report.from_dict(read_report(report_json))
    _write_all(_render_outputs(report, targets))
    _print_summary(report, quiet, no_color, targets)


@cli.command("compare")
@click.argument("old_json", metavar="OLD.json")
@click.argument("new_json", metavar="NEW.json")
@click.option("--require", type=click.Choice(LEVELS),
              help="Fail when the new level is below this rung [default: the old report's level].")
@click.option("--markdown", "markdown_path", metavar="PATH", help="Write the comparison as Markdown.")
@click.option("--quiet", "-q", is_flag=True, help="Print only the verdict line.")
@click.option("--no-color", is_flag=True, help="No colour on the terminal (NO_COLOR is honoured too).")
def compare_command(old_json, new_json, require, markdown_path, quiet, no_color):
    """Compare two JSON reports (an earlier batch, then a new one) and gate on drift.

    Exits 1 when the new level is below --require (by default: below the old
    report's level) or when an edge oriented in the old report is not oriented
    the same way in the new one; 0 otherwise; 2 when either file is not a
    valid report.
    """
    from preflight.outputs import plan_outputs
    from preflight.report.compare import compare_reports, render_comparison_markdown, render_comparison_text
    from preflight.report.json import read_report

    targets = plan_outputs([("--markdown", markdown_path)], [old_json, new_json])
    comparison = compare_reports(read_report(old_json), read_report(new_json), require=require)
    _write_all([(target, render_comparison_markdown(comparison)) for target in targets])
    _echo_summary(lambda style: render_comparison_text(comparison, style=style, quiet=quiet), no_color, targets)
    sys.exit(EXIT_PASS if comparison.passed else EXIT_WEAKER)


@cli.command("schema")
def schema_command():
    """Print the JSON Schema of the report."""
    from preflight.report.json import schema_text

    click.echo(schema_text(), nl=False)


@cli.command("rules")
def rules_command():
    """Print the rules table that turns findings into the conclusion."""
    from preflight.rules import rules_table_text

    click.echo(rules_table_text(), nl=False)


@cli.command("policy")
def policy_command():
    """Print every policy key with its default, as TOML you can edit."""
    from preflight.policy import describe_policy

    for key, default, doc in describe_policy():
        click.echo(f"# {doc}")
        if isinstance(default, bool):
            value = "true" if default else "false"
        elif isinstance(default, (tuple, list)):
            value = "[" + ", ".join(f'"{v}"' for v in default) + "]"
        elif isinstance(default, str):
            value = f'"{default}"'
        else:
            value = repr(default)
        click.echo(f"{key} = {value}\n")


def main(argv: list[str] | None = None) -> None:
    """Entry point: maps every outcome onto the documented exit codes."""
    from preflight.interruption import Interrupted, settle, stop_on_signals

    stop_on_signals()
    try:
        code = cli.main(args=argv, prog_name="preflight", standalone_mode=False)
        sys.exit(code or 0)
    except SystemExit:
        raise
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.exceptions.Abort as exc:
        if isinstance(exc.__cause__, KeyboardInterrupt):  # Ctrl-C where no handler of ours was set
            click.echo("preflight: interrupted by SIGINT", err=True)
            sys.exit(130)
        click.echo("preflight: aborted", err=True)
        sys.exit(EXIT_INPUT)
    except click.UsageError as exc:
        hint = f" (see `{exc.ctx.command_path} --help`)" if exc.ctx is not None else ""
        click.echo(f"preflight: error: {exc.format_message()}{hint}", err=True)
        sys.exit(EXIT_INPUT)
    except click.ClickException as exc:
        click.echo(f"preflight: error: {exc.format_message()}", err=True)
        sys.exit(EXIT_INPUT)
    except InputError as exc:
        from preflight.report.text import visible

        message = visible(" ".join(str(exc).split()))
        click.echo(f"preflight: error: {message}", err=True)
        sys.exit(EXIT_INPUT)
    except BrokenPipeError:
        sys.exit(EXIT_INPUT)
    except KeyboardInterrupt:
        click.echo("preflight: interrupted by SIGINT", err=True)
        sys.exit(130)
    except Interrupted as exc:  # workers stopped, temporary files removed on the way out
        settle()
        click.echo(f"preflight: interrupted by {exc.signal_name}", err=True)
        sys.exit(exc.exit_code)
    except Exception as exc:  # anything else is our bug: say so, never exit 1
        click.echo(f"preflight: internal error: {type(exc).__name__}: {exc} "
                   "(please report it; no report was written)", err=True)
        sys.exit(EXIT_INTERNAL)
