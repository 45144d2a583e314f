"""A plan written through the admin's own text template: a file per job, or one file with a
block per job, in planned start order.

Template syntax (our own; see README and docs/methods.md):

- Fields are Python `str.format` fields: `{job}`, `{hours:.2f}`; `{{` and `}}` are literal
  braces. Only the names in `JOB_FIELDS` (in a job block and a file-name pattern) and
  `BATCH_FIELDS` (in a header or footer) exist; no attribute or index access.
- A line `@@ header`, `@@ job`, `@@ footer` or `@@ name` starts that section; text before the
  first such line belongs to `job` (so a template without sections is one job block).
- With a `name` section (one line: a file-name pattern with the job fields) every job gets a
  file of its own in the output folder; without one, the output is one file: the header once,
  the job block for each job, the footer once.
"""

from __future__ import annotations

import string
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from assignplan.errors import InputError
from assignplan.instance import NO_DUE, Instance
from assignplan.plan import PlanResult
from assignplan.units import hours_of, iso

JOB_FIELDS = {
    "job": "the job's name",
    "node": "the node it is planned on",
    "start": "its planned start, ISO 8601",
    "start_h": "its planned start, hours from the window start",
    "start_min": "its planned start, whole minutes from the window start",
    "end": "its planned end, ISO 8601",
    "hours": "its run time on its node, hours",
    "minutes": "its run time on its node, whole minutes",
    "cores": "cores it needs",
    "memory_gib": "memory it needs, GiB",
    "gpus": "GPUs it needs",
    "after": "the jobs it follows, by name, separated by spaces (empty if none)",
    "group": "its job group (the name before count expansion)",
    "due": "its due time, ISO 8601 (empty if none)",
    "seq": "its place in planned start order, from 1",
}
BATCH_FIELDS = {
    "window_start": "the window start, ISO 8601",
    "jobs": "the number of jobs",
    "method": "the method that made the plan",
}
SECTIONS = ("header", "job", "footer", "name")
MARKER = "@@ "


@dataclass(frozen=True)
class Section:
    """A section's text and the template line its first line is on (for messages)."""

    text: str
    first_line: int


@dataclass(frozen=True)
class Template:
    """A checked template: its sections by name (`name` only for one file per job)."""

    path: Path
    sections: dict[str, Section]

    @property
    def per_job(self) -> bool:
        return "name" in self.sections


def read_template(path: Path) -> Template:
    """Read and check a template file: sections, balanced braces, known fields only.
    InputError (one line: the file, the line, the problem) otherwise."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"--template {path}: no such file") from None
    except (OSError, UnicodeDecodeError) as err:
        raise InputError(f"--template {path}: cannot read it ({err})") from None
    template = Template(path, _sections(path, text))
    for name, section in template.sections.items():
        known = BATCH_FIELDS if name in ("header", "footer") else JOB_FIELDS
        _check_fields(path, name, section, known)
    name = template.sections.get("name")
    if name is not None and len(name.text.strip().splitlines()) != 1:
        raise InputError(f"{path}:{name.first_line}: the name section is one line, a file-name"
                         " pattern such as {job}.sh")
    if template.per_job and ({"header", "footer"} & set(template.sections)):
        raise InputError(f"{path}: header and footer belong to one-file output; a template "
                         "with a name section writes a file per job")
    return template


def _sections(path: Path, text: str) -> dict[str, Section]:
    lines = text.splitlines(keepends=True)
    found: dict[str, Section] = {}
    current, start, body = "job", 1, []
    for number, line in enumerate(lines, start=1):
        if line.startswith(MARKER) or line.rstrip("\r\n") == MARKER.strip():
            word = line[len(MARKER):].strip() if line.startswith(MARKER) else ""
            if word not in SECTIONS:
                raise InputError(f"{path}:{number}: unknown section '{word}'; sections are "
                                 f"{', '.join('@@ ' + s for s in SECTIONS)}")
            if body or current != "job":
                _add(found, path, current, Section("".join(body), start), start)
            if word in found:
                raise InputError(f"{path}:{number}: a second {word} section")
            current, start, body = word, number + 1, []
        else:
            body.append(line)
    _add(found, path, current, Section("".join(body), start), start)
    if "job" not in found or not found["job"].text.strip():
        raise InputError(f"{path}: no job block (the text written for each job)")
    return found


def _add(found: dict[str, Section], path: Path, name: str, section: Section, line: int) -> None:
    if name in found:
        raise InputError(f"{path}:{line}: a second {name} section")
    found[name] = section


def _check_fields(path: Path, name: str, section: Section, known: dict[str, str]) -> None:
    """Every field of `section` a plain known name; braces balanced (per line, as
    `str.format` reads them)."""
    for offset, line in enumerate(section.text.splitlines()):
        where = f"{path}:{section.first_line + offset}"
        try:
            parsed = list(string.Formatter().parse(line))
        except ValueError as err:
            raise InputError(f"{where}: {_brace_problem(err)}") from None
        for _, field, spec, _ in parsed:
            if field is None:
                continue
            if field not in known:
                what = "a field needs a name" if field == "" else f"unknown field {{{field}}}"
                raise InputError(f"{where}: {what} in the {name} section; fields here: "
                                 f"{', '.join(known)} ({{{{ and }}}} for literal braces)")
            if spec and ("{" in spec or "}" in spec):
                raise InputError(f"{where}: field {{{field}}} has a field inside its format")


def _brace_problem(err: ValueError) -> str:
    text = str(err)
    if "Single '}'" in text:
        return "a '}' without its '{' (write }} for a literal brace)"
    if "expected '}'" in text or "Single '{'" in text:
        return "a '{' without its '}' (write {{ for a literal brace)"
    return f"bad field ({text})"


def _plain(value: float) -> int | float:
    """A whole number as an int (64, not 64.0), else the float."""
    return int(value) if float(value).is_integer() else float(value)


def job_values(inst: Instance, result: PlanResult) -> list[dict]:
    """Every job's fields (`JOB_FIELDS`), in planned start order (ties by job order)."""
    order = np.lexsort((np.arange(inst.n_jobs), result.start))
    origin = inst.window_start
    rows = []
    for seq, j in enumerate(order.tolist(), start=1):
        start, end = int(result.start[j]), int(result.end[j])
        due = int(inst.due[j])
        rows.append({
            "job": inst.job_names[j],
            "node": inst.node_names[int(result.assign[j])],
            "start": iso(origin, start) or "",
            "start_h": _plain(hours_of(start)),
            "start_min": start,
            "end": iso(origin, end) or "",
            "hours": _plain(hours_of(end - start)),
            "minutes": end - start,
            "cores": int(inst.demand[j, 0]),
            "memory_gib": _plain(round(inst.demand[j, 1] / 1024, 4)),
            "gpus": int(inst.demand[j, 2]),
            "after": " ".join(inst.job_names[k] for k in inst.predecessors(j).tolist()),
            "group": inst.job_groups[j],
            "due": "" if due == NO_DUE else (iso(origin, due) or ""),
            "seq": seq,
        })
    return rows


def render(template: Template, inst: Instance, result: PlanResult) -> dict[str, str] | str:
    """The rendered text: {file name: text} with a name section, else the one file's text.
    InputError naming the template line on a format that does not fit a field's value, a
    file name that is not a plain name, or two jobs given the same file name."""
    rows = job_values(inst, result)
    if not template.per_job:
        batch = {"window_start": inst.window_start.isoformat(), "jobs": inst.n_jobs,
                 "method": result.method}
        parts = [_fill(template, "header", batch)] if "header" in template.sections else []
        parts += [_fill(template, "job", row) for row in rows]
        if "footer" in template.sections:
            parts.append(_fill(template, "footer", batch))
        return "".join(parts)
    files: dict[str, str] = {}
    name = template.sections["name"]
    for row in rows:
        file_name = _fill(template, "name", row).strip()
        if file_name in ("", ".", "..") or "/" in file_name or "\\" in file_name:
            raise InputError(f"{template.path}:{name.first_line}: job {row['job']} gets the "
                             f"file name '{file_name}', not a plain file name")
        if file_name in files:
            raise InputError(f"{template.path}:{name.first_line}: two jobs get the file name "
                             f"'{file_name}'; put {{job}} in the pattern")
        files[file_name] = _fill(template, "job", row)
    return files


def _fill(template: Template, section: str, values: dict) -> str:
    part = template.sections[section]
    lines = part.text.splitlines(keepends=True)
    out = []
    for offset, line in enumerate(lines):
        try:
            out.append(line.format(**values))
        except (ValueError, TypeError) as err:
            raise InputError(f"{template.path}:{part.first_line + offset}: {err} "
                             f"(in the {section} section)") from None
    return "".join(out)


def write_export(template: Template, inst: Instance, result: PlanResult, out: Path) -> list[str]:
    """Render and write (call inside `files.all_or_nothing`); the lines saying what was
    written. One file per job into folder `out` (created), or the one file `out`."""
    from assignplan.files import atomic_write_text, ensure_folder

    rendered = render(template, inst, result)
    if isinstance(rendered, str):
        atomic_write_text(out, rendered)
        return [f"wrote {out} ({inst.n_jobs:,} jobs)"]
    ensure_folder(out)
    for name, text in rendered.items():
        atomic_write_text(out / name, text)
    return [f"wrote {len(rendered):,} files into {out}"]
