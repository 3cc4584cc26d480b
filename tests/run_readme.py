"""Run every command the README shows, as written, in README order, in the current folder (a
fresh copy of the project: ``tests/newcomer.sh`` calls this). Standard library only.

- ```bash blocks run line by line through bash (continuation lines joined), ```python blocks
  through the project's virtual environment; inline `sigmagrid ...`, `snakemake ...` and
  `.venv/bin/...` commands in the prose run too, with ``.venv/bin`` first on PATH, as for a user
  who activated the environment.
- Placeholders are filled as a reader would: ``<case_id>`` with the first case of the default
  run, ``DIR`` with a scratch folder, ``CONFIG`` with ``config/config.yaml``. A command with an
  optional part (``[--quick]``) or a ``...`` is a synopsis, not a command: skipped.
- Left out, each for its reason (``SKIPPED``): the test command (CI runs that very line in
  ``.ci/run``) and the cluster commands (they need SLURM: ``tests/cluster/slurm_check.sh`` runs
  the profile on a one-node cluster in CI).

Exits non-zero at the first command that fails, naming it.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time
from pathlib import Path

SKIPPED = {
    'python3 -m venv .venv && .venv/bin/pip install ".[test]" && .venv/bin/python -m pytest':
        "the test suite: CI runs this very line (.ci/run)",
    '.venv/bin/pip install ".[cluster]"': "cluster install: tests/cluster/slurm_check.sh",
    '.venv/bin/snakemake --profile workflow/profiles/slurm --default-resources slurm_partition=compute '
    'slurm_account=myproject': "needs a SLURM cluster: tests/cluster/slurm_check.sh",
    'pip install ".[cluster]"': "cluster install: tests/cluster/slurm_check.sh",
}
QUICK_START = "python3 -m venv .venv && .venv/bin/pip install . && .venv/bin/snakemake --cores 2"
INLINE = re.compile(r"`((?:\.venv/bin/)?(?:sigmagrid|snakemake|pip) [^`]+)`")


def blocks(text: str):
    """(kind, command) in README order: kind is bash, python or inline."""
    fence = None
    body: list[str] = []
    paragraph: list[str] = []
    for line in text.splitlines() + [""]:
        if fence is None and (line.startswith("```") or not line.strip()):
            for command in INLINE.findall(" ".join(paragraph)):  # inline code may wrap a line
                yield "inline", command
            paragraph = []
        if line.startswith("```"):
            if fence is None:
                fence, body = line[3:].strip(), []
            else:
                if fence == "bash":
                    yield from (("bash", c) for c in _shell_lines(body))
                elif fence == "python":
                    yield "python", "\n".join(body)
                fence = None
        elif fence is not None:
            body.append(line)
        else:
            paragraph.append(line.strip())


def _shell_lines(body: list[str]):
    joined, current = [], ""
    for line in body:
        if line.strip().startswith("#") and not current:
            continue  # a comment line of its own
        if line.rstrip().endswith("\\"):
            current += line.rstrip()[:-1].strip() + " "
            continue
        current += line.strip()
        joined.append(current)
        current = ""
    for command in joined:
        command = re.sub(r"\s+#.*$", "", command).strip()  # trailing comments
        if command:
            yield re.sub(r"\s+", " ", command)


def _fill(command: str, case_id: str | None, inline: bool = False) -> str | None:
    if "[" in command or "..." in command or "PART" in command:
        return None
    words = command.split()
    if inline and words[0].endswith("sigmagrid") and len(words) <= 3 and not words[1].startswith("-") \
            and all(w.startswith("--") for w in words[2:]):
        return None  # the prose names a command, or one of its options
    if "<case_id>" in command:
        if case_id is None:
            return None
        command = command.replace("<case_id>", case_id)
    return re.sub(r"\bDIR\b", "readme-out", re.sub(r"\bCONFIG\b", "config/config.yaml", command))


def main() -> int:
    text = Path("README.md").read_text()
    env = dict(os.environ, PATH=f"{Path('.venv/bin').resolve()}{os.pathsep}{os.environ['PATH']}")
    ran = 0
    for kind, command in blocks(text):
        cases = sorted(Path("results/cases").glob("*.nc"))
        filled = command if kind == "python" else _fill(command, cases[0].stem if cases else None, kind == "inline")
        shown = command.splitlines()[0] + (" ..." if "\n" in command else "")
        if kind != "python" and command in SKIPPED:
            print(f"readme: skipped `{command}`: {SKIPPED[command]}", file=sys.stderr)
            continue
        if filled is None:
            print(f"readme: skipped `{command}`: a synopsis or the name of a command", file=sys.stderr)
            continue
        # a chain a && b runs part by part (the same stops), so that each part's time is seen
        parts = [("python", filled)] if kind == "python" else [("bash", p) for p in filled.split(" && ")]
        for how, part in parts:
            started = time.perf_counter()
            argv = [".venv/bin/python", "-c", part] if how == "python" else ["bash", "-c", part]
            done = subprocess.run(argv, env=env, capture_output=True, text=True)
            seconds = time.perf_counter() - started
            if done.returncode != 0:
                print(f"readme: FAILED ({done.returncode}) `{shown}`\n{done.stdout[-2000:]}\n{done.stderr[-4000:]}",
                      file=sys.stderr)
                return 1
            note = " (the first default run, SEA kernels compiled in it)" if (
                command == QUICK_START and "snakemake" in part) else ""
            print(f"readme: ok in {seconds:.0f} s{note}: `{part if how == 'bash' else shown}`", file=sys.stderr)
        ran += 1
    print(f"readme: {ran} commands and examples ran as written", file=sys.stderr)
    return 0 if ran else 1


if __name__ == "__main__":
    sys.exit(main())
