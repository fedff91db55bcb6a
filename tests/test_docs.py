"""The docs say what the code does: README commands, CI script and file-format keys."""

import functools
import os
import re

from conftest import ROOT


def _readme_commands():
    text = (ROOT / "README.md").read_text()
    setup = text.split("## Set up", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```sh\n(.+?)\n```", setup)


def test_readme_has_exactly_two_setup_commands():
    commands = _readme_commands()
    assert len(commands) == 2, commands
    assert commands[0].endswith("coildrive demo")
    assert "pytest" in commands[1]
    # each makes a virtual environment of its own, so running one after the other works
    venvs = [re.match(r"python3 -m venv (\S+) ", c).group(1) for c in commands]
    assert venvs[0] != venvs[1], venvs


def test_ci_runs_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text()
    assert _readme_commands()[1] in ci.splitlines(), "CI must run the README's test command verbatim"
    assert "CI=true" in ci and "ngspice" in ci


def test_every_drive_key_is_documented():
    from coildrive.config import Coil, Duty, Hold, PullIn, Supply, Thermal
    doc = (ROOT / "docs" / "file-formats.md").read_text()
    import dataclasses
    for cls in (Coil, Supply, Thermal, PullIn, Hold, Duty):
        for f in dataclasses.fields(cls):
            assert re.search(rf"^{f.name} = ", doc, re.M), f"{cls.__name__}.{f.name} not in docs/file-formats.md"


@functools.lru_cache(maxsize=None)  # each page parsed once, however many links point at it
def _github_anchors(path):
    """The #anchors GitHub gives the headings of a Markdown file (lower case, punctuation
    dropped, spaces to hyphens, -1, -2 ... for repeats; GitHub's rule from memory, no spec
    cited); code blocks are not headings."""
    text = re.sub(r"```.*?```", "", path.read_text(), flags=re.S)
    seen, anchors = {}, set()
    for heading in re.findall(r"^#{1,6}\s+(.+?)\s*#*\s*$", text, re.M):
        slug = re.sub(r"[^\w\- ]", "", heading.strip().lower()).replace(" ", "-")
        n = seen.get(slug, 0)
        seen[slug] = n + 1
        anchors.add(slug if n == 0 else f"{slug}-{n}")
    return anchors


def test_relative_links_and_anchors_resolve():
    pages = [ROOT / "README.md", ROOT / "DEVELOPERS.md", *sorted((ROOT / "docs").glob("*.md"))]
    broken = []
    for page in pages:
        text = re.sub(r"```.*?```", "", page.read_text(), flags=re.S)
        # [text](target) links, and docs/page.md#anchor references written out in prose
        targets = re.findall(r"\[[^\]]*\]\(([^)\s]+)\)", text)
        targets += [os.path.relpath(ROOT / m, page.parent)
                    for m in re.findall(r"(?<![\w/.])(docs/[\w\-]+\.md(?:#[\w\-]+)?)", text)]
        for target in dict.fromkeys(targets):  # each once, in order
            if re.match(r"[a-z][a-z0-9+.-]*:", target):
                continue  # http:, mailto: ...
            file_part, _, anchor = target.partition("#")
            dest = (page.parent / file_part).resolve() if file_part else page
            if not dest.exists():
                broken.append(f"{page.name}: {target} (no such file)")
            elif anchor and dest.suffix == ".md" and anchor not in _github_anchors(dest):
                broken.append(f"{page.name}: {target} (no such heading)")
    assert not broken, broken


#: A pipe into one of these only picks lines, so every shown line is one the command prints.
_LINE_PICKERS = ("head", "tail", "grep", "sed")


def _shown_runs(page="README.md", made=()):
    """``(command, columns, arguments, shown output lines)`` for every ``$ coildrive ...``
    in ``page``'s code blocks whose files are all in the repository or named in ``made``
    (files the test writes first); a pipe is allowed only into a command that picks lines
    (head, tail, grep, sed), the shown lines being then a part of what the command prints."""
    import shlex

    runs, block, inside = [], [], False
    for line in (ROOT / page).read_text().splitlines():
        if line.startswith("```"):
            if inside:
                cmd = None
                for ln in block + ["$ "]:
                    if ln.startswith("$ "):
                        if cmd is not None:
                            runs.append((cmd, shown))
                        cmd, shown = ln[2:], []
                    elif cmd is not None:
                        shown.append(ln)
                block = []
            inside = not inside
        elif inside:
            block.append(line)
    out = []
    for cmd, shown in runs:
        cmd, *piped = cmd.split(" | ")
        picks = all(p.split()[0] in _LINE_PICKERS for p in piped)
        words = shlex.split(cmd) if cmd and picks and "|" not in cmd and "--port" not in cmd else []
        # shown at 100 columns unless a line is wider (a table rich leaves unwrapped)
        columns = str(max([100] + [len(ln) for ln in shown]))
        if words and words[0].startswith("COLUMNS="):
            columns, words = words[0].split("=", 1)[1], words[1:]
        if not words or words[0] != "coildrive" or words[1] in ("emulate", "capture", "stream"):
            continue
        files = [w for w in words[2:] if w.endswith((".toml", ".cdcap", ".csv")) and not w.startswith("-")]
        inputs = [w for w in files if w.startswith(("examples/", "boards/"))]
        if any(w not in inputs and w not in made for w in files if w.endswith((".cdcap", ".csv"))) or \
                any(w.endswith(".toml") and not (ROOT / w).exists() and w not in made for w in files):
            continue
        out.append((cmd, columns, [str(ROOT / w) if w in inputs else w for w in words[1:]], shown))
    return out


def _stale_lines(runs):
    """The shown lines (bar the elided "...") that do not appear, spaces aside, in what
    their command prints today (run in the current directory)."""
    from typer.testing import CliRunner

    from coildrive.cli import app

    def norm(text):
        # the time a sweep took is the machine's, not the command's: any shown time passes
        # (spaces first: a longer time can wrap the line between the figure and its unit)
        return re.sub(r"in [\d.e+]+ [mµ]?s;", "in # s;", re.sub(r"\s+", " ", text)).strip()
    stale = []
    for cmd, columns, args, shown in runs:
        res = CliRunner().invoke(app, args, env={"COLUMNS": columns})
        printed = norm(res.stdout + res.stderr)
        for line in shown:
            if line.strip() and "..." not in line and norm(line) not in printed:
                stale.append(f"{cmd}: {line.strip()}")
    return stale


def test_readme_outputs_are_what_the_commands_print(tmp_path, monkeypatch):
    # every shown line appears in what the command prints today: a change that moves a
    # figure must update the README with it
    runs = _shown_runs()
    assert len(runs) >= 8, [r[0] for r in runs]   # the parser still finds the usage examples
    monkeypatch.chdir(tmp_path)
    stale = _stale_lines(runs)
    assert not stale, "\n".join(stale[:20])


def test_bench_scope_example_is_what_the_commands_print(tmp_path, monkeypatch):
    # docs/bench.md's scope records (and the README's line of the same example), written
    # as the page says, then its commands run: the records' head, check (with the plot),
    # fit, the 40 % coil and the record that stops mid-actuation
    from scope_layouts import write_bench_doc_records

    monkeypatch.chdir(tmp_path)
    made = write_bench_doc_records(tmp_path)
    runs = _shown_runs("docs/bench.md", made)
    readme = [r for r in _shown_runs("README.md", made) if any(w in made for w in r[2])]
    assert len(runs) == 4 and len(readme) == 1, [r[0] for r in runs + readme]
    stale = _stale_lines(runs + readme)
    text = (ROOT / "docs" / "bench.md").read_text()
    shown_head = text.split("$ head -9 scope.csv\n", 1)[1].split("\n$ ", 1)[0].splitlines()
    head = (tmp_path / "scope.csv").read_text().splitlines()[:9]
    stale += [f"head -9 scope.csv: {a}" for a, b in zip(shown_head, head) if a != b]
    assert len(shown_head) == 9 and not stale, "\n".join(stale[:20])


def test_tuning_examples_are_what_the_commands_print(tmp_path, monkeypatch):
    # docs/tuning.md's offline sweeps: the demo valve as it is, on a copy of its board
    # given the switch's transition times (as the page says), and with no feasible ripple
    board = (ROOT / "boards" / "lab-m32-zener.toml").read_text()
    assert '\nmax_voltage = "100 V"\n' in board
    (tmp_path / "lab-m32-timed.toml").write_text(board.replace(
        '\nmax_voltage = "100 V"\n', '\nmax_voltage = "100 V"\nrise_time = "200 ns"\nfall_time = "150 ns"\n'))
    monkeypatch.chdir(tmp_path)
    runs = _shown_runs("docs/tuning.md", ["lab-m32-timed.toml"])
    assert len(runs) == 3, [r[0] for r in runs]
    stale = _stale_lines(runs)
    assert not stale, "\n".join(stale[:20])
