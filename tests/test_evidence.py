"""Evidence bundles: contents, manifest, tamper detection down to the byte, safe paths, re-run.

The analysis stages are replaced by the invented check result here (the bundle's mechanics are
under test); the end-to-end build and verify on the demo site run in the demo's test.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import zipfile
from pathlib import Path

import duckdb
import numpy as np
import pytest
from click.testing import CliRunner
from report_fixtures import checked, example_aligned, example_check, write_site

from perfcheck import align, db, evidence, ingest, periods, pipeline
from perfcheck.cli import main
from perfcheck.errors import DataError, PerfcheckError

RAW = "time,p1\n" + "".join(f"2025-06-{d:02d}T12:00:00+02:00,{1000 + d}\n" for d in range(1, 31))


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> tuple[Path, Path]:
    """One bundle for the module (writing its report takes a few seconds)."""
    tmp = tmp_path_factory.mktemp("evidence")
    site = write_site(tmp)
    logs = tmp / "logs"
    logs.mkdir()
    raw = logs / "box_2025-06.csv"
    raw.write_text(RAW * 100)  # > 64 KiB, so the file has more than one checksum block
    con = db.connect(tmp / "site.duckdb")
    add_file(con, str(raw), hashlib.sha256(raw.read_bytes()).hexdigest(), raw.stat().st_size)
    start, end = periods.month_period(site, "2025-06")
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(align, "load_aligned", lambda *a, **k: example_aligned())
        out = evidence.build_bundle(con, site, start, end, tmp / "claim.zip",
                                    "perfcheck evidence site.toml --month 2025-06 --out claim.zip",
                                    result=checked(site, example_check()))
    con.close()
    return out["path"], raw


@pytest.fixture()
def bundle(built, tmp_path, monkeypatch) -> tuple[Path, Path]:
    """A fresh copy of the bundle; the re-run's stages give the invented result again."""
    monkeypatch.setattr(pipeline, "update", lambda *a, **k: [])
    monkeypatch.setattr(pipeline, "view", lambda con, site, s, e: checked(site, fresh_run()))
    path = tmp_path / "claim.zip"
    shutil.copy(built[0], path)
    return path, built[1]


def add_file(con: duckdb.DuckDBPyConnection, path: str, sha256: str, size: int) -> None:
    """A source_files row as ingest writes it, for a June 2025 file."""
    con.execute("INSERT INTO source_files (file_id, path, logger, sha256, size_bytes, rows_read, "
                "rows_loaded, rows_duplicate, rows_quarantined, conflicts, first_ts, last_ts, "
                "ingested_at, tool_version) VALUES (1, ?, 'box', ?, ?, 30, 30, 0, 0, 0, "
                "'2025-06-01 10:00+00', '2025-06-30 10:00+00', now(), '0.1.0')",
                [path, sha256, size])


def fresh_run() -> dict:
    r = example_check()
    r["run"]["created_at"] = "2030-01-01T00:00:00+00:00"  # a later run: only this may differ
    return r


def rewrite(path: Path, name: str, change) -> None:
    with zipfile.ZipFile(path) as z:
        members = {n: z.read(n) for n in z.namelist()}
    members[name] = change(members[name])
    with zipfile.ZipFile(path, "w") as z:
        for n, data in members.items():
            z.writestr(n, data)


def test_bundle_contents(bundle):
    path, _ = bundle
    with zipfile.ZipFile(path) as z:
        names = z.namelist()
        manifest = json.loads(z.read("MANIFEST.json"))
        info = json.loads(z.read("bundle.json"))
        command = z.read("command.txt").decode()
    for name in ("raw/box_2025-06.csv", "site/site.toml", "results/check.json",
                 "results/events.csv", "results/monthly.csv", "results/guarantees.csv",
                 "results/coverage.json", "results/quarantine.csv", "report/report.pdf",
                 "report/report.html",
                 "report/figures/daily_energy.png", "methods.txt", "versions.json",
                 "README.txt"):
        assert name in names, name
    assert set(manifest["files"]) == set(names) - {"MANIFEST.json"}
    assert all(evidence.safe_member(n) for n in names)
    assert info["raw_files"] == ["raw/box_2025-06.csv"]
    assert command == "perfcheck evidence site.toml --month 2025-06 --out claim.zip\n"


def test_verify_passes_and_reruns(bundle):
    v = evidence.verify_bundle(bundle[0])
    assert v.ok, v.problems
    # 8 figures, PDF, HTML, 6 results (quarantine.csv among them), site file, 1 raw file,
    # bundle.json, command, versions, methods, README
    assert v.files_checked == 23
    assert any("reproduced results/check.json" in n for n in v.notes)


def test_one_changed_byte_is_named(bundle):
    path, raw = bundle
    data = raw.read_bytes()
    pos = 70000 + data[70000:].index(b"1012")  # a digit in the second 64 KiB block
    rewrite(path, "raw/box_2025-06.csv",
            lambda b: b[:pos + 3] + b"9" + b[pos + 4:])  # "1012" -> "1019"
    v = evidence.verify_bundle(path)
    assert not v.ok
    assert v.problems == [f"raw/box_2025-06.csv: sha256 differs from the manifest: byte "
                          f"{pos + 3} changed from 0x32 '2' to 0x39 '9'"]
    assert v.notes == ["re-run skipped: the bundle's files do not match their manifest"]


def test_longer_change_is_named_by_block(bundle):
    path, _ = bundle
    rewrite(path, "results/check.json", lambda b: b.replace(b'"epi": 0.944', b'"epi": 0.99'))
    with zipfile.ZipFile(path) as z:
        size = len(z.read("results/check.json"))  # one block: the file is below 64 KiB
    v = evidence.verify_bundle(path, rerun_analysis=False)
    assert v.problems == [f"results/check.json: sha256 differs from the manifest: bytes "
                          f"0-{size - 1} changed"]


def test_unlisted_and_missing_files(bundle):
    path, _ = bundle
    with zipfile.ZipFile(path, "a") as z:
        z.writestr("extra.txt", b"added later")
    v = evidence.verify_bundle(path, rerun_analysis=False)
    assert v.problems == ["extra.txt: in the bundle but not in the manifest"]


@pytest.mark.parametrize("name", ["../outside.txt", "/etc/passwd", "raw/../../x", "C:\\x"])
def test_unsafe_paths_refused(tmp_path, name):
    path = tmp_path / "bad.zip"
    with zipfile.ZipFile(path, "w") as z:
        z.writestr(name, b"x")
    with pytest.raises(PerfcheckError, match="unsafe path in bundle"):
        evidence.verify_bundle(path)


def test_rerun_difference_is_reported(bundle, monkeypatch):
    def drifted(con, site, s, e):
        r = checked(site, fresh_run())
        r["metrics"]["period"]["epi"] = 0.95
        return r

    monkeypatch.setattr(pipeline, "view", drifted)
    v = evidence.verify_bundle(bundle[0])
    assert not v.ok
    assert v.problems == ["re-run from the bundle does not reproduce results/check.json: "
                          "/metrics/period/epi: bundle 0.944, re-run 0.95"]


def test_locate_single_byte_and_insertion():
    rng = np.random.default_rng(7)
    data = rng.integers(0, 256, 200_000, dtype=np.uint8).tobytes()
    sums = evidence.block_sums(data)
    changed = bytearray(data)
    changed[150_000] = (changed[150_000] + 1) % 256
    assert evidence.locate_change(sums, bytes(changed)) == [
        f"byte 150000 changed from {data[150_000]:#04x} {evidence._char(data[150_000])} to "
        f"{changed[150_000]:#04x} {evidence._char(changed[150_000])}"]
    inserted = data[:10] + b"x" + data[10:]
    notes = evidence.locate_change(sums, inserted)
    assert notes[0] == "bytes 0-65535 changed"  # every later block shifts too
    assert len(notes) == 4


def test_strip_volatile_only_run_time():
    a, b = example_check(), fresh_run()
    assert evidence.json_differences(evidence.strip_volatile(a), evidence.strip_volatile(b)) == []
    assert evidence.json_differences(a, b) == [
        '/run/created_at: bundle "2025-07-02T04:00:00+00:00", re-run "2030-01-01T00:00:00+00:00"']


def test_changed_raw_file_refused(tmp_path, monkeypatch):
    site = write_site(tmp_path)
    raw = tmp_path / "box.csv"
    raw.write_text(RAW)
    con = db.connect(tmp_path / "site.duckdb")
    add_file(con, "box.csv", "ab", 1)
    with pytest.raises(DataError, match=r"box.csv: logger file changed since it was ingested"):
        evidence.raw_files(con, site)


def test_cli_verify_exit_codes(bundle, tmp_path):
    runner = CliRunner()
    ok = runner.invoke(main, ["verify", str(bundle[0])])
    assert ok.exit_code == 0 and ok.output.strip().endswith("verified")
    rewrite(bundle[0], "site/site.toml", lambda b: b.replace(b"ac_kw = 50", b"ac_kw = 60"))
    bad = runner.invoke(main, ["verify", str(bundle[0]), "--no-rerun"])
    assert bad.exit_code == 1 and "FAILED: site/site.toml: sha256 differs" in bad.output
    junk = tmp_path / "junk.zip"
    junk.write_bytes(b"not a zip")
    r = runner.invoke(main, ["verify", str(junk)])
    assert r.exit_code == 2
    assert r.output.startswith(f"perfcheck: error: {junk}: not a readable zip file")


@pytest.fixture(scope="module")
def demo_months(tmp_path_factory):
    """Two months of the invented demo plant, ingested and modelled in a fresh database."""
    from perfcheck.scenario import demo_dir
    from perfcheck.site import load_site

    tmp = tmp_path_factory.mktemp("demo_months")
    src = demo_dir()
    shutil.copy(src / "site.toml", tmp / "site.toml")
    logs = []
    for p in sorted(src.glob("*_2024-0[56].csv")):
        shutil.copy(p, tmp / p.name)
        logs.append(tmp / p.name)
    site = load_site(tmp / "site.toml")
    con = db.connect(tmp / "site.duckdb")
    try:
        pipeline.update(con, site, logs)
    finally:
        con.close()
    return site, tmp


@pytest.mark.slow
def test_demo_bundle_verifies_and_names_a_changed_byte(demo_months):
    site, tmp = demo_months
    runner = CliRunner()
    out = runner.invoke(main, ["evidence", str(tmp / "site.toml"), "--from", "2024-06-01",
                               "--to", "2024-06-30", "--out", str(tmp / "claim.zip")])
    assert out.exit_code == 0, out.output
    ok = runner.invoke(main, ["verify", str(tmp / "claim.zip")])
    assert ok.exit_code == 0, ok.output
    assert "reproduced results/check.json" in ok.output
    with zipfile.ZipFile(tmp / "claim.zip") as z:
        raw = sorted(n for n in z.namelist() if n.startswith("raw/"))
        command = z.read("command.txt").decode()
    assert len(raw) == 4  # May (reference windows draw on it) and June, two loggers each
    assert command.startswith("perfcheck evidence ") and "--from 2024-06-01 --to 2024-06-30" \
        in command
    name = raw[1]
    rewrite(tmp / "claim.zip", name, lambda b: b[:5000] + bytes([b[5000] ^ 1]) + b[5001:])
    bad = runner.invoke(main, ["verify", str(tmp / "claim.zip")])
    assert bad.exit_code == 1
    assert f"FAILED: {name}: sha256 differs from the manifest: byte 5000 changed" in bad.output


def test_bundle_names_files_by_their_place_in_the_bundle(bundle):
    with zipfile.ZipFile(bundle[0]) as z:
        coverage = json.loads(z.read("results/coverage.json"))
        html = z.read("report/report.html").decode()
    assert [f["path"] for f in coverage["files"]] == ["raw/box_2025-06.csv"]
    assert str(bundle[1].parent) not in html  # no path of our disk inside the bundle


def test_evidence_keeps_an_existing_bundle_without_force(tmp_path, monkeypatch):
    site = write_site(tmp_path)
    out = tmp_path / "claim.zip"
    out.write_bytes(b"an earlier bundle")
    args = ["evidence", str(site.path), "--month", "2025-06", "--out", str(out)]
    r = CliRunner().invoke(main, args)
    assert r.exit_code == 2
    assert r.output == (f"perfcheck: error: {out}: a bundle exists already; give --force to "
                        "replace it\n")
    assert out.read_bytes() == b"an earlier bundle"
    assert not (tmp_path / "site.duckdb").exists()  # refused before any work
    monkeypatch.setattr(evidence, "build_bundle", lambda con, site, s, e, path, command: {
        "path": path, "files": 1, "manifest_sha256": "0" * 64})
    r = CliRunner().invoke(main, [*args, "--force"])
    assert r.exit_code == 0, r.output
    assert r.output.startswith(f"bundle: {out} (1 files)")


# --------------------------------------------------------------------------------------------
# fuzz findings of issue 10: verify never reads outside the bundle, caps what it extracts, and
# answers a malformed bundle with one line and exit 2


def resign(path: Path, name: str, data: bytes) -> None:
    """Replace member ``name`` and write a manifest that matches (as a forger would)."""
    with zipfile.ZipFile(path) as z:
        members = {n: z.read(n) for n in z.namelist() if n != evidence.MANIFEST}
    members[name] = data
    manifest = json.dumps(evidence.manifest_for(members)).encode()
    with zipfile.ZipFile(path, "w") as z:
        z.writestr(evidence.MANIFEST, manifest)
        for n, d in members.items():
            z.writestr(n, d)


def _verify_cli(path: Path):
    return CliRunner().invoke(main, ["verify", str(path)])


def test_site_file_outside_the_bundle_is_refused(bundle, tmp_path):
    outside = tmp_path / "elsewhere.toml"
    outside.write_text("[site]\n")
    with zipfile.ZipFile(bundle[0]) as z:
        info = json.loads(z.read("bundle.json"))
    for where in (str(outside), "../elsewhere.toml", "site/other.toml"):
        resign(bundle[0], "bundle.json", json.dumps({**info, "site_file": where}).encode())
        r = _verify_cli(bundle[0])
        assert r.exit_code == 2, r.output
        assert r.stderr == (f"perfcheck: error: bundle.json: site_file {where!r} is not a file "
                            "of the bundle\n")


@pytest.mark.parametrize("member, data, message", [
    (evidence.MANIFEST, b"[]", "MANIFEST.json: not a perfcheck manifest (expected \"files\": "
                               "{name: {sha256, block_bytes, blocks}})"),
    (evidence.MANIFEST, b"{not json", "MANIFEST.json: not valid JSON (Expecting property name "
                                      "enclosed in double quotes: line 1 column 2 (char 1))"),
])
def test_malformed_manifest_exit_2(bundle, member, data, message):
    rewrite(bundle[0], member, lambda b: data)
    r = _verify_cli(bundle[0])
    assert (r.exit_code, r.stderr) == (2, f"perfcheck: error: {message}\n")


@pytest.mark.parametrize("info, message", [
    (b"[1]", "bundle.json: expected a JSON object"),
    (b'{"site_file": "site/site.toml", "raw_files": "raw/x.csv"}',
     "bundle.json: raw_files: expected a list of member names"),
    (b'{"site_file": "site/site.toml", "raw_files": ["/etc/passwd"]}',
     "bundle.json: raw_files: '/etc/passwd' is not a file of the bundle"),
    (b'{"site_file": "site/site.toml", "raw_files": [], "period": {"start": "2025-06-01"}}',
     "bundle.json: period: expected start and end as ISO 8601 with an offset ('end')"),
])
def test_malformed_bundle_json_exit_2(bundle, info, message):
    resign(bundle[0], "bundle.json", info)
    r = _verify_cli(bundle[0])
    assert (r.exit_code, r.stderr) == (2, f"perfcheck: error: {message}\n")


def test_zip_bomb_refused_by_declared_size(tmp_path, monkeypatch):
    # the caps are lowered so that the test needs kilobytes, not gigabytes: the rule is the
    # same (the declared size is checked before anything is read)
    monkeypatch.setattr(evidence, "MAX_MEMBER_BYTES", 10_000)
    monkeypatch.setattr(evidence, "MAX_BUNDLE_BYTES", 15_000)
    bomb = tmp_path / "bomb.zip"
    with zipfile.ZipFile(bomb, "w", zipfile.ZIP_DEFLATED) as z:
        z.writestr("zeros.bin", bytes(50_000))  # 50 kB of zeros deflate to about 100 bytes
    r = _verify_cli(bomb)
    assert (r.exit_code, r.stderr) == (
        2, f"perfcheck: error: {bomb}: member 'zeros.bin' declares 50,000 bytes, over the cap "
           "of 10,000; not extracted\n")
    with zipfile.ZipFile(bomb, "w", zipfile.ZIP_DEFLATED) as z:
        z.writestr("a.bin", bytes(8_000))
        z.writestr("b.bin", bytes(8_000))
    r = _verify_cli(bomb)
    assert (r.exit_code, r.stderr) == (
        2, f"perfcheck: error: {bomb}: members declare 16,000 bytes in all, over the cap of "
           "15,000; not extracted\n")


def test_member_larger_than_declared_is_not_read_past_its_size(tmp_path):
    # a forged local header that declares 10 bytes for 50,000: the reader stops at the
    # declared size and the CRC check fails, so the bundle is refused as unreadable
    bomb = tmp_path / "liar.zip"
    with zipfile.ZipFile(bomb, "w", zipfile.ZIP_DEFLATED) as z:
        z.writestr("zeros.bin", bytes(50_000))
    data = bytearray(bomb.read_bytes())
    size = (50_000).to_bytes(4, "little")
    for at in [i for i in range(len(data) - 3) if data[i:i + 4] == size]:
        data[at:at + 4] = (10).to_bytes(4, "little")  # local and central uncompressed sizes
    bomb.write_bytes(bytes(data))
    r = _verify_cli(bomb)
    assert r.exit_code == 2
    assert r.stderr.startswith(f"perfcheck: error: {bomb}: not a readable zip file (")


def test_bundle_write_failure_leaves_no_partial_zip(tmp_path, monkeypatch):
    # a full disk while the zip is written: one line (OutputError), no claim.zip, no .part
    site = write_site(tmp_path)
    raw = tmp_path / "box_2025-06.csv"
    raw.write_text(RAW)
    con = db.connect(tmp_path / "site.duckdb")
    add_file(con, str(raw), hashlib.sha256(raw.read_bytes()).hexdigest(), raw.stat().st_size)
    start, end = periods.month_period(site, "2025-06")
    out = tmp_path / "out"
    calls = []

    def full_disk(self, info, data, *a, **k):
        calls.append(info)
        if len(calls) > 3:
            raise OSError(28, "No space left on device")
        return writestr(self, info, data, *a, **k)

    writestr = zipfile.ZipFile.writestr
    monkeypatch.setattr(align, "load_aligned", lambda *a, **k: example_aligned())
    monkeypatch.setattr(zipfile.ZipFile, "writestr", full_disk)
    with pytest.raises(PerfcheckError) as err:
        evidence.build_bundle(con, site, start, end, out / "claim.zip", "perfcheck evidence",
                              result=checked(site, example_check()))
    con.close()
    assert str(err.value) == (f"{out / 'claim.zip'}: cannot write (No space left on device); "
                              "nothing was written")
    assert list(out.iterdir()) == []


def test_file_grown_under_the_same_name_stays_verifiable(tmp_path):
    # Fuzz finding of issue 10: a month exported on the 15th and again on the 1st under the
    # same name made every later bundle fail ("logger file changed since it was ingested").
    # Invented truth: the second export repeats days 1-15 (one value corrected on day 3) and
    # adds days 16-30, so it loads 15 rows, finds 14 duplicates and quarantines one conflict.
    site = write_site(tmp_path)
    raw = tmp_path / "box_2025-06.csv"
    days = ["time,p1\n"] + [f"2025-06-{d:02d}T12:00:00+02:00,{1000 + d}\n" for d in range(1, 31)]
    first = "".join(days[:16])
    raw.write_text(first)
    con = db.connect(tmp_path / "site.duckdb")
    (a,) = ingest.ingest_files(con, site, [raw])
    raw.write_text("".join(days).replace(",1003\n", ",1033\n"))
    (b,) = ingest.ingest_files(con, site, [raw])
    assert (a.rows_loaded, b.rows_read, b.rows_loaded, b.rows_duplicate, b.rows_quarantined,
            b.conflicts) == (15, 30, 15, 14, 1, 1)
    files = evidence.raw_files(con, site)
    assert [f["member"] for f in files] == ["raw/box_2025-06.csv", f"raw/{b.file_id}/"
                                            "box_2025-06.csv"]
    assert files[0]["data"] == first.encode() and files[1]["data"] == raw.read_bytes()
    # the ingest of the bundle's files, in its order, gives the same accounting
    again = db.connect(tmp_path / "again.duckdb")
    for f in files:
        (tmp_path / f["member"]).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / f["member"]).write_bytes(f["data"])
    redo = ingest.ingest_files(again, site, [tmp_path / f["member"] for f in files])
    assert [(r.rows_loaded, r.rows_duplicate, r.rows_quarantined) for r in redo] == [
        (15, 0, 0), (15, 14, 1)]


def test_bundle_outputs_a_person_reads_carry_no_code_values(bundle):
    """Issue 12: no "from memory" anywhere in the bundle; the texts a person reads (README,
    methods, report) without Python literals, scientific notation or scope codes; local dates
    in the README as in the report; machine instants ISO 8601 with "T" and an offset."""
    import re

    from test_report import CODE_VALUES, _visible_text

    path, _ = bundle
    with zipfile.ZipFile(path) as z:
        members = {n: z.read(n) for n in z.namelist() if not n.endswith((".png", ".pdf"))}
    for name, data in members.items():
        if not name.startswith("raw/"):
            assert b"from memory" not in data, name
    readable = {n: members[n].decode() for n in ("README.txt", "methods.txt",
                                                  "results/guarantees.csv")}
    readable["report/report.html"] = _visible_text(members["report/report.html"].decode())
    for name, text in readable.items():
        for bad in CODE_VALUES:
            if name.endswith(".csv") and bad in ("True", "False", "inverter:"):
                continue  # CSV keeps the machine values of its columns
            assert bad not in text, (name, bad)
    assert "June 2025 (site-local time, Europe/Zurich)" in readable["README.txt"]
    assert "2025-07-01 00:00+02:00, the end excluded" in readable["README.txt"]
    coverage = members["results/coverage.json"].decode()
    stamps = re.findall(r'"\d{4}-\d\d-\d\d[ T][^"]*"', coverage)
    assert stamps and all("T" in s and re.search(r"[+-]\d\d:\d\d\"$", s) for s in stamps)
