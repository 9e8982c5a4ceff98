"""The provenance of an output folder as a short table, for the reports.

``manifest.json`` (:func:`reconstruct.io.outputs.build_manifest` and
:func:`~reconstruct.io.outputs.extend_manifest`) records every run on a
folder: the command, its times, every input with its SHA-256, parameters,
versions and outputs. A reader of the report needs only enough of it to know
which files and which software made what they see, and where the full record
is: the runs, the inputs with short hashes, the versions, and a link to the
manifest file beside the page.
"""

from __future__ import annotations

from pathlib import PurePath

from reconstruct.report.html import escape, table_html

__all__ = ["SHORT_HASH_CHARS", "provenance_html", "manifest_runs"]

#: Hex digits of a SHA-256 shown on the page (the full digest is in manifest.json). Twelve hex
#: digits (48 bits) tell files apart at a glance, as short commit hashes do (common practice, no
#: published source).
SHORT_HASH_CHARS = 12

_VERSION_ORDER = ("voidcube", "python", "numpy", "scipy", "networkx", "pyvista", "vtk", "pyyaml", "ezdxf")


def manifest_runs(manifest: dict) -> list[dict]:
    """The runs a manifest records: the run that made the folder, then its later runs."""
    if not isinstance(manifest, dict):
        return []
    first = {k: v for k, v in manifest.items() if k != "later_runs"}
    later = [run for run in manifest.get("later_runs", []) if isinstance(run, dict)]
    return ([first] if first.get("command") else []) + later


def _input_rows(runs) -> list[list]:
    """One row per distinct input file (path and digest), with the first command that read it."""
    rows, seen = [], set()
    for run in runs:
        inputs = run.get("inputs") or {}
        if not isinstance(inputs, dict):
            continue
        for role, record in inputs.items():
            if not isinstance(record, dict):
                continue
            path, digest = str(record.get("path", "-")), str(record.get("sha256") or "-")
            if (path, digest) in seen:
                continue
            seen.add((path, digest))
            size = record.get("bytes")
            rows.append([str(role), PurePath(path).name, digest[:SHORT_HASH_CHARS],
                         size if isinstance(size, int) else "-", path, str(run.get("command", "-"))])
    return rows


def _versions_text(runs) -> str:
    """The versions of the run that made the folder, and any later run's that differ."""
    texts = []
    for run in runs:
        versions = run.get("versions") or {}
        if not isinstance(versions, dict):
            continue
        names = [n for n in _VERSION_ORDER if n in versions] + sorted(
            n for n in versions if n not in _VERSION_ORDER and n != "platform")
        text = ", ".join(f"{n} {versions[n]}" for n in names if versions[n] is not None)
        if versions.get("platform"):
            text += f"; on {versions['platform']}"
        if text and text not in texts:
            texts.append(text)
    return " | ".join(texts) if texts else "-"


def provenance_html(manifest: dict, *, manifest_href: str = "manifest.json") -> str:
    """A section: the runs on the folder, their inputs with short hashes, the
    versions, and a link to the manifest file (relative to the page)."""
    runs = manifest_runs(manifest)
    run_rows = [[str(r.get("command", "-")), str(r.get("started_utc", "-")), str(r.get("finished_utc", "-"))]
                for r in runs]
    parts = [
        "<h2>Provenance</h2><p>What made this page; the full record (every parameter, every output and the "
        f'whole SHA-256 of every input) is in <a href="{escape(manifest_href)}">{escape(manifest_href)}</a> '
        "beside this page.</p>",
        table_html(["command", "started (UTC)", "finished (UTC)"], run_rows, caption="Runs on this folder")
        if run_rows else "<p>No run is recorded in the manifest.</p>",
    ]
    inputs = _input_rows(runs)
    if inputs:
        parts.append(table_html(["input", "file", f"SHA-256 (first {SHORT_HASH_CHARS} hex digits)", "bytes",
                                 "path", "read by"], inputs, caption="Input files"))
    parts.append(f"<p><b>Versions:</b> {escape(_versions_text(runs))}</p>")
    return "".join(parts)
