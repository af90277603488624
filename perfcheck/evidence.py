"""Evidence bundles for a warranty or insurance claim, and their verification.

``build_bundle`` writes one zip holding everything needed to check the findings without us:
the raw logger files, the site file, the results (JSON, CSV), the report (PDF, HTML, figures),
data coverage and quality, the methods statement, versions and the exact command, and
``MANIFEST.json`` with the sha256 of every other file. ``verify_bundle`` checks every hash,
names any tampered byte, and re-runs the whole analysis from the bundle alone in a temporary
folder, confirming that the results are reproduced (identical JSON apart from run timestamps).

Locating a changed byte: the manifest stores, for every 64 KiB block of a file, a short hash
and two checksums, S1 = sum(b_i) and S2 = sum((i + 1) b_i), both mod the prime 2^31 - 1 (the
position-weighted checksum in the manner of Fletcher's, Fletcher 1982, IEEE Trans. Commun.
30(1):247; the citation from memory). One changed byte at position j by d changes S1 by d and S2 by
(j + 1) d, so j = dS2 / dS1 - 1 (mod the prime); the repaired block is then checked against the
block hash. Other changes are named by the block (byte range) they touch.
"""

from __future__ import annotations

import hashlib
import json
import tempfile
import zipfile
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import __version__, analysis, atomic, db, ingest, pipeline, report, versions
from perfcheck.errors import DataError, PerfcheckError
from perfcheck.site import Site, load_site

BLOCK = 65536
PRIME = 2**31 - 1
MANIFEST = "MANIFEST.json"
BUNDLE_FORMAT = "perfcheck-evidence-1"
# Fields of the check document that legitimately differ between runs.
VOLATILE = (("run", "created_at"),)
_FIXED_TIME = (2000, 1, 1, 0, 0, 0)  # zip member times: the bundle's bytes depend on content only
# Deflate level of the members: the raw logger files are most of a bundle, and at level 1 a
# site-year of 1-minute CSV deflates about six times faster than at zlib's default 6 for a
# sixth more bytes (measured on the benchmark site-year: 8.2 against 7.0 MB of 27 MB).
DEFLATE_LEVEL = 1

README = """\
Evidence bundle written by perfcheck {version}
Site: {site}    Period: {period} (site-local time, {zone})
        from {start} to {end}, the end excluded

Contents
  MANIFEST.json      sha256 (and block checksums) of every other file in this bundle
  bundle.json        period, site file and raw files in ingest order, tool version
  command.txt        the exact command that wrote this bundle
  versions.json      tool, Python and dependency versions
  methods.txt        methods statement with references
  site/              the site file used
  raw/               the raw logger files: those covering the period, and the earlier ones the
                     reference windows (detector baselines, typical cell temperature) draw on
  results/           check.json (metrics, events, losses, degradation, guarantees), events.csv,
                     monthly.csv, guarantees.csv, coverage.json (data coverage and quality),
                     quarantine.csv (every line not loaded, with its reason and raw text)
  report/            report.pdf, report.html and the figures as PNG

Check it:  perfcheck verify {name}
verify checks every hash against MANIFEST.json and names any changed byte, then re-runs the
analysis from this bundle alone and compares the results. Quote the sha256 of MANIFEST.json
(printed by 'perfcheck evidence' and by 'perfcheck verify') in the claim, so that the manifest
itself can be checked.

{cautions}
"""


# --------------------------------------------------------------------------------------------
# checksums (pure)


def block_sums(data: bytes, block: int = BLOCK) -> list[list[Any]]:
    """Per block: [first 16 hex digits of its sha256, S1, S2] (see the module docstring)."""
    out = []
    for off in range(0, max(len(data), 1), block):
        chunk = data[off:off + block]
        b = np.frombuffer(chunk, dtype=np.uint8).astype(np.int64)
        s1 = int(b.sum() % PRIME)
        s2 = int((b * np.arange(1, len(b) + 1, dtype=np.int64)).sum() % PRIME)
        out.append([hashlib.sha256(chunk).hexdigest()[:16], s1, s2])
    return out


def locate_change(old: list[list[Any]], data: bytes, block: int = BLOCK) -> list[str]:
    """Describe where ``data`` differs from the file the block sums ``old`` were taken of."""
    new = block_sums(data, block)
    notes = []
    for k, (was, now) in enumerate(zip(old, new, strict=False)):
        if was[0] == now[0]:
            continue
        off = k * block
        one = _single_byte(was, now, data[off:off + block])
        if one is not None:
            j, before, after = one
            notes.append(f"byte {off + j} changed from {before:#04x} {_char(before)} to "
                         f"{after:#04x} {_char(after)}")
        else:
            end = off + len(data[off:off + block]) - 1
            notes.append(f"bytes {off}-{end} changed")
    if len(old) != len(new):
        notes.append(f"length changed ({len(old)} blocks recorded, {len(new)} now)")
    return notes


def _single_byte(was: list, now: list, chunk: bytes) -> tuple[int, int, int] | None:
    d1 = (now[1] - was[1]) % PRIME
    d2 = (now[2] - was[2]) % PRIME
    if d1 == 0:
        return None
    j = (d2 * pow(d1, -1, PRIME)) % PRIME - 1
    delta = d1 if d1 <= 255 else d1 - PRIME
    if not (0 <= j < len(chunk)) or not -255 <= delta <= 255:
        return None
    after = chunk[j]
    before = after - delta
    if not 0 <= before <= 255:
        return None
    repaired = chunk[:j] + bytes([before]) + chunk[j + 1:]
    if hashlib.sha256(repaired).hexdigest()[:16] != was[0]:
        return None
    return j, before, after


def _char(b: int) -> str:
    return repr(chr(b)) if 32 <= b < 127 else "(not printable)"


def safe_member(name: str) -> bool:
    """A zip member name that stays inside the bundle: relative, no '..', no drive, no '\\'."""
    p = PurePosixPath(name)
    return bool(name) and "\\" not in name and not p.is_absolute() and ".." not in p.parts \
        and ":" not in p.parts[0]


def strip_volatile(doc: dict) -> dict:
    out = json.loads(json.dumps(doc))
    for path in VOLATILE:
        node = out
        for key in path[:-1]:
            node = node.get(key, {})
        node.pop(path[-1], None)
    return out


def json_differences(a: Any, b: Any, where: str = "", limit: int = 10) -> list[str]:
    """Up to ``limit`` JSON pointers where ``a`` and ``b`` differ, with both values."""
    out: list[str] = []

    def walk(x: Any, y: Any, at: str) -> None:
        if len(out) >= limit:
            return
        if isinstance(x, dict) and isinstance(y, dict):
            for k in sorted(set(x) | set(y)):
                walk(x.get(k, "<missing>"), y.get(k, "<missing>"), f"{at}/{k}")
        elif isinstance(x, list) and isinstance(y, list) and len(x) == len(y):
            for i, (u, v) in enumerate(zip(x, y, strict=True)):
                walk(u, v, f"{at}/{i}")
        elif x != y:
            out.append(f"{at or '/'}: bundle {_brief(x)}, re-run {_brief(y)}")

    walk(a, b, where)
    return out


def _brief(v: Any) -> str:
    text = json.dumps(v)
    return text if len(text) <= 60 else text[:57] + "..."


# --------------------------------------------------------------------------------------------
# building


def _ingested_bytes(con: duckdb.DuckDBPyConnection, site: Site, given: str, sha256: str
                    ) -> tuple[str, bytes]:
    """The bytes of an ingested file version, and the name it had: the file on disk (as
    given, else relative to the site file) while it is unchanged, else the copy the ingest
    kept (a file that grew or changed under the same name since); sha256 checked either
    way."""
    changed = None
    for p in (Path(given), site.path.parent / given):
        if p.is_file():
            data = p.read_bytes()
            if hashlib.sha256(data).hexdigest() == sha256:
                return p.name, data
            changed = p
            break
    row = con.execute(db.sql("evidence_copy"), {"sha256": sha256}).fetchone()
    if row is not None:
        data = zlib.decompress(row[0])
        if hashlib.sha256(data).hexdigest() == sha256:
            return Path(given).name, data
    if changed is not None:
        raise DataError(f"{changed}: logger file changed since it was ingested (sha256 differs) "
                        "and the database keeps no copy of the version ingested; re-ingest it "
                        "or restore the original")
    raise DataError(f"{given}: ingested logger file not found (looked as given and beside "
                    f"{site.path.name})")


def raw_files(con: duckdb.DuckDBPyConnection, site: Site) -> list[dict]:
    """Every ingested logger file version (the analysis behind any window reads the whole
    history), with its bytes; two versions or files of the same name get a folder each after
    the first (``raw/<file id>/<name>``)."""
    rows = con.execute(db.sql("evidence_files")).df()
    if rows.empty:
        raise DataError(f"{site.path}: no ingested logger files")
    out, names = [], set()
    for r in rows.to_dict("records"):
        base, data = _ingested_bytes(con, site, r["path"], r["sha256"])
        name = f"raw/{base}"
        if name in names:  # two files of the same name: from different folders, or versions
            name = f"raw/{r['file_id']}/{base}"
        names.add(name)
        out.append({"member": name, "data": data, "source_path": r["path"],
                    "sha256": r["sha256"]})
    return out


def quarantine_csv(con: duckdb.DuckDBPyConnection, where: dict[str, str]) -> bytes:
    """Every quarantined line of the bundle's raw files: file (as named in the bundle), line,
    instant (ISO 8601 with offset; that of the nearest readable line before it), reason and the
    line as written."""
    rows = ingest.quarantined(con)
    out = pd.DataFrame({
        "file": [where.get(f, Path(f).name) for f in rows["file"]],
        "line": rows["line"],
        "ts": [None if pd.isna(t) else pd.Timestamp(t).isoformat() for t in rows["ts"]],
        "reason": rows["reason"], "raw": rows["raw"]})
    return out.to_csv(index=False, lineterminator="\n").encode()


def build_bundle(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp,
                 end: pd.Timestamp, out_zip: Path, command: str,
                 result: dict | None = None) -> dict[str, Any]:
    """Write the evidence bundle for [start, end) to ``out_zip``.

    The members are written in name order, ``MANIFEST.json`` last. Those that sort before the
    report's (the raw logger files, most of the bundle's bytes) are deflated and hashed in a
    second thread while the report renders: zlib and hashlib release the interpreter's lock,
    so on two cores the bundle costs little more than the report.

    Returns ``{"path": Path, "manifest_sha256": str, "files": int}``.
    """
    out_zip = Path(out_zip)
    files = raw_files(con, site)
    if result is None:
        result = analysis.view(con, site, start, end, analysis.update(con, site))
    aligned = analysis.series(con, site, start, end)
    quality = report.db_quality(con, start, end)
    # inside the bundle a logger file is named by its place in the bundle, not on our disk
    where = {f["source_path"]: f["member"] for f in files}
    quality["files"] = [{**f, "path": where.get(f["path"], Path(f["path"]).name)}
                        for f in quality["files"]]
    members: dict[str, bytes] = {}
    members["results/guarantees.csv"] = report.guarantees_csv(result.get("guarantees", [])).encode()
    coverage = {"per_inverter": report.quality_summary(aligned, site.timezone),
                **report.iso_instants(quality, site.timezone)}
    members["results/coverage.json"] = report.dump_json(coverage).encode()
    members["results/quarantine.csv"] = quarantine_csv(con, where)
    members[f"site/{site.path.name}"] = site.path.read_bytes()
    for f in files:
        members[f["member"]] = f["data"]
    members["bundle.json"] = report.dump_json({
        "format": BUNDLE_FORMAT, "tool_version": __version__,
        "period": {"start": start.isoformat(), "end": end.isoformat()},
        "site_file": f"site/{site.path.name}",
        "raw_files": [f["member"] for f in files],
    }).encode()
    members["command.txt"] = (command + "\n").encode()
    members["versions.json"] = report.dump_json(versions.versions()).encode()
    members["methods.txt"] = methods_text(result, site.timezone).encode()
    readme = README.format(version=__version__, site=site.name,
                           period=report.period_text(result, site.timezone), zone=site.timezone,
                           start=report.local_text(start, site.timezone),
                           end=report.local_text(end, site.timezone), name=out_zip.name,
                           cautions="\n".join(report.CAUTIONS))
    members["README.txt"] = readme.encode()
    early = {n: d for n, d in members.items() if n < REPORT_DIR}
    with atomic.replacing_file(out_zip) as tmp_zip, \
            zipfile.ZipFile(tmp_zip, "w", zipfile.ZIP_DEFLATED) as z, \
            ThreadPoolExecutor(1) as pool:  # last: its thread ends before the zip closes
        written = pool.submit(_add, z, early)
        listed = pool.submit(manifest_for, early)
        members.update(_report_members(site, result, aligned, quality))
        late = {n: d for n, d in members.items() if n not in early}
        written.result()  # the zip is written by one thread at a time
        _add(z, late)
        manifest = manifest_for(late)
        manifest["files"].update(listed.result()["files"])
        manifest_bytes = report.dump_json(manifest).encode()
        _add(z, {MANIFEST: manifest_bytes})
    return {"path": out_zip, "manifest_sha256": hashlib.sha256(manifest_bytes).hexdigest(),
            "files": len(members) + 1}


REPORT_DIR = "report/"  # the report's members in the bundle


def _report_members(site: Site, result: dict, aligned: pd.DataFrame, quality: dict
                    ) -> dict[str, bytes]:
    """The files :func:`perfcheck.report.render` writes, as bundle members: the report (PDF,
    HTML, figures) and the results it writes beside it."""
    members = {}
    with tempfile.TemporaryDirectory() as tmp:
        paths = report.render(site, result, aligned, quality, Path(tmp))
        for key, p in paths.items():
            if key.startswith("figure_"):
                members[f"{REPORT_DIR}figures/{p.name}"] = p.read_bytes()
        for key, name in (("pdf", f"{REPORT_DIR}report.pdf"),
                          ("html", f"{REPORT_DIR}report.html"),
                          ("json", "results/check.json"), ("events_csv", "results/events.csv"),
                          ("monthly_csv", "results/monthly.csv")):
            members[name] = paths[key].read_bytes()
    return members


def _add(z: zipfile.ZipFile, members: dict[str, bytes]) -> None:
    """Write ``members`` into the open bundle, in name order."""
    for name in sorted(members):
        info = zipfile.ZipInfo(name, date_time=_FIXED_TIME)
        info.compress_type = zipfile.ZIP_DEFLATED
        z.writestr(info, members[name], compresslevel=DEFLATE_LEVEL)


def _entry(data: bytes) -> dict[str, Any]:
    return {"sha256": hashlib.sha256(data).hexdigest(), "size_bytes": len(data),
            "block_bytes": BLOCK, "blocks": block_sums(data)}


def manifest_for(members: dict[str, bytes]) -> dict[str, Any]:
    return {"format": BUNDLE_FORMAT, "files": {n: _entry(d) for n, d in sorted(members.items())}}


def methods_text(result: dict, tz: str) -> str:
    lines = ["Methods statement", "", "Each quantity and finding, with its published source:", ""]
    lines += [f"- {name}: {source}." for name, source in report.METHODS]
    methods = sorted({e["method"] for e in result.get("events", []) if e.get("method")})
    if methods:
        lines += ["", "Methods named by the events found:", ""] + [f"- {m}" for m in methods]
    rules = result.get("settings", {}).get("rules", [])
    if rules:
        lines += ["", "Filtering rules:", ""] + [f"- {r}" for r in rules]
    lines += ["", "Settings:", ""] + [f"- {label}: {value}" for label, value in
                                      report.setting_rows(result.get("settings", {}), tz)]
    lines += ["", "The exact values are in results/check.json (settings).", ""]
    return "\n".join(lines)


# --------------------------------------------------------------------------------------------
# verifying


@dataclass
class Verification:
    ok: bool = True
    manifest_sha256: str = ""
    files_checked: int = 0
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def fail(self, text: str) -> None:
        self.ok = False
        self.problems.append(text)


# Caps on what verify extracts, checked against the sizes the zip declares before anything is
# read (and the reader stops at the declared size), so a zip bomb cannot fill memory or disk.
# A year of 1-minute logger data is some 50 MB; a bundle of many plant-years fits well inside.
MAX_MEMBER_BYTES = 2**30
MAX_BUNDLE_BYTES = 4 * 2**30
_CHUNK = 2**20


def _extract(path: Path, root: Path) -> dict[str, Path]:
    """Every member of the bundle written under ``root`` in chunks, by member name; refuses
    unsafe names, duplicate names and declared sizes over the caps before writing anything."""
    try:
        with zipfile.ZipFile(path) as z:
            infos = [i for i in z.infolist() if not i.is_dir()]
            names = [i.filename for i in infos]
            bad = [n for n in names if not safe_member(n)]
            if bad:
                raise PerfcheckError(f"{path}: unsafe path in bundle: {bad[0]!r} (absolute or "
                                     "leaving the bundle); not extracted")
            twice = sorted({n for n in names if names.count(n) > 1})
            if twice:
                raise PerfcheckError(f"{path}: member {twice[0]!r} appears twice in the bundle; "
                                     "not extracted")
            big = [i for i in infos if i.file_size > MAX_MEMBER_BYTES]
            if big:
                raise PerfcheckError(f"{path}: member {big[0].filename!r} declares "
                                     f"{big[0].file_size:,} bytes, over the cap of "
                                     f"{MAX_MEMBER_BYTES:,}; not extracted")
            total = sum(i.file_size for i in infos)
            if total > MAX_BUNDLE_BYTES:
                raise PerfcheckError(f"{path}: members declare {total:,} bytes in all, over the "
                                     f"cap of {MAX_BUNDLE_BYTES:,}; not extracted")
            out = {}
            for info in infos:
                target = root / info.filename
                target.parent.mkdir(parents=True, exist_ok=True)
                with z.open(info) as src, open(target, "wb") as dst:
                    while chunk := src.read(_CHUNK):
                        dst.write(chunk)
                out[info.filename] = target
            return out
    except (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, EOFError, NotImplementedError,
            RuntimeError, zlib.error) as exc:
        raise PerfcheckError(f"{path}: not a readable zip file ({exc})") from None


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(_CHUNK):
            h.update(chunk)
    return h.hexdigest()


def _json_member(files: dict[str, Path], name: str) -> Any:
    if name not in files:
        raise PerfcheckError(f"bundle has no {name}")
    try:
        return json.loads(files[name].read_bytes())
    except ValueError as exc:
        raise PerfcheckError(f"{name}: not valid JSON ({exc})") from None


def _manifest_entries(manifest: Any) -> dict[str, dict[str, Any]]:
    """The manifest's file entries, each checked for the keys verify uses."""
    listed = manifest.get("files") if isinstance(manifest, dict) else None
    ok = isinstance(listed, dict) and all(
        isinstance(e, dict) and isinstance(e.get("sha256"), str)
        and isinstance(e.get("blocks"), list) and isinstance(e.get("block_bytes"), int)
        and e["block_bytes"] > 0 for e in listed.values())
    if not ok:
        raise PerfcheckError(f"{MANIFEST}: not a perfcheck manifest (expected \"files\": "
                             "{name: {sha256, block_bytes, blocks}})")
    return listed


def check_hashes(files: dict[str, Path], v: Verification) -> dict[str, Any]:
    """Every extracted member against its manifest entry; a changed member is named with the
    byte or blocks that changed."""
    if MANIFEST not in files:
        raise PerfcheckError(f"bundle has no {MANIFEST}")
    v.manifest_sha256 = _sha256(files[MANIFEST])
    manifest = _json_member(files, MANIFEST)
    listed = _manifest_entries(manifest)
    for name in sorted(set(files) - set(listed) - {MANIFEST}):
        v.fail(f"{name}: in the bundle but not in the manifest")
    for name, entry in sorted(listed.items()):
        if name not in files:
            v.fail(f"{name}: listed in the manifest but missing from the bundle")
            continue
        v.files_checked += 1
        if _sha256(files[name]) == entry["sha256"]:
            continue
        try:
            where = locate_change(entry["blocks"], files[name].read_bytes(), entry["block_bytes"])
        except (TypeError, ValueError, IndexError):
            where = []  # block sums of a malformed entry: the change is named by its file only
        v.fail(f"{name}: sha256 differs from the manifest: " + "; ".join(where or ["changed"]))
    return manifest


def _bundle_info(files: dict[str, Path]) -> dict[str, Any]:
    """bundle.json, checked: the site file and every raw file are members of the bundle (never
    a path outside it), the period two ISO 8601 instants."""
    info = _json_member(files, "bundle.json")
    if not isinstance(info, dict):
        raise PerfcheckError("bundle.json: expected a JSON object")
    site_file, raws, period = info.get("site_file"), info.get("raw_files"), info.get("period")
    if not isinstance(site_file, str) or site_file not in files:
        raise PerfcheckError(f"bundle.json: site_file {site_file!r} is not a file of the bundle")
    if not isinstance(raws, list):
        raise PerfcheckError("bundle.json: raw_files: expected a list of member names")
    for r in raws:
        if not isinstance(r, str) or r not in files:
            raise PerfcheckError(f"bundle.json: raw_files: {r!r} is not a file of the bundle")
    try:
        info["period"] = {k: pd.Timestamp(period[k]) for k in ("start", "end")}
        if any(t.tzinfo is None for t in info["period"].values()):
            raise ValueError("no UTC offset")
    except (TypeError, KeyError, ValueError) as exc:
        raise PerfcheckError(f"bundle.json: period: expected start and end as ISO 8601 with "
                             f"an offset ({exc})") from None
    return info


def rerun(files: dict[str, Path], work: Path, v: Verification) -> None:
    """Re-run the analysis from the bundle's own files (extracted in ``files``) in a fresh
    database in ``work``, and compare."""
    info = _bundle_info(files)
    stored = _json_member(files, "results/check.json")
    if info.get("tool_version") != __version__:
        v.notes.append(f"bundle written by perfcheck {info.get('tool_version')}, verified with "
                       f"{__version__}: small numeric differences may come from the versions")
    site = load_site(files[info["site_file"]])
    con = db.connect(work / "verify.duckdb")
    try:
        pipeline.update(con, site, [files[m] for m in info["raw_files"]])
        again = pipeline.view(con, site, info["period"]["start"], info["period"]["end"])
    finally:
        con.close()
    diffs = json_differences(strip_volatile(stored), strip_volatile(json.loads(
        report.dump_json(again))))
    if diffs:
        v.fail("re-run from the bundle does not reproduce results/check.json: " + "; ".join(diffs))
    else:
        v.notes.append("re-run from the bundle alone reproduced results/check.json "
                       "(apart from run.created_at)")


def verify_bundle(path: Path, rerun_analysis: bool = True) -> Verification:
    """Check every hash of the bundle at ``path`` and (by default) re-run its analysis.

    Raises PerfcheckError (exit 2) for a bundle that cannot be read as one: not a zip, an
    unsafe or repeated member name, a member over the size caps, a malformed manifest or
    bundle.json, a site file named outside the bundle."""
    v = Verification()
    with tempfile.TemporaryDirectory() as tmp:
        files = _extract(Path(path), Path(tmp) / "bundle")
        check_hashes(files, v)
        if rerun_analysis and v.ok:
            rerun(files, Path(tmp), v)
        elif rerun_analysis:
            v.notes.append("re-run skipped: the bundle's files do not match their manifest")
    return v
