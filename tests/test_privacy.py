"""Pseudonymous person codes, small-group suppression and a scan of the built site for personal data."""
from __future__ import annotations

import base64
import csv
import re
from pathlib import Path

import pandas as pd
import pytest

from generator import privacy
from generator.privacy import code_table, digest32, make_coder, redactor, small_groups

#: RFC 4231 section 4.3 (test case 2): HMAC-SHA256 with key "Jefe".
RFC4231_KEY = "Jefe"
RFC4231_DATA = "what do ya want for nothing?"
RFC4231_MAC = "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"


def test_base32_oracle_matches_rfc4648() -> None:
    # RFC 4648 section 10 test vector: BASE32("foobar") = "MZXW6YTBOI======"
    assert base64.b32encode(b"foobar") == b"MZXW6YTBOI======"


def test_digest_is_base32_of_hmac_sha256() -> None:
    # RFC 4231 section 4.3 (test case 2), encoded as RFC 4648 base32 without padding
    expected = base64.b32encode(bytes.fromhex(RFC4231_MAC)).decode().rstrip("=")
    assert digest32(RFC4231_KEY, RFC4231_DATA) == expected
    code, warning = make_coder(pd.DataFrame({"person_id": [RFC4231_DATA]}), RFC4231_KEY)
    assert warning is None
    assert code(RFC4231_DATA) == "P-" + expected[:8]


def test_codes_are_stable_keyed_and_well_formed() -> None:
    people = pd.DataFrame({"person_id": [f"E1{i:04d}" for i in range(300)]})
    code_a, _ = make_coder(people, "key-a")
    code_b, _ = make_coder(people, "key-b")
    codes = [code_a(p) for p in people["person_id"]]
    assert all(re.fullmatch(r"P-[A-Z2-7]{8}", c) for c in codes)
    assert len(set(codes)) == len(codes)
    assert codes == [make_coder(people, "key-a")[0](p) for p in people["person_id"]]
    assert sum(a == code_b(p) for a, p in zip(codes, people["person_id"])) == 0
    assert all(p not in c for p, c in zip(people["person_id"], codes))


def test_collisions_lengthen_the_codes() -> None:
    ids = [f"X{i}" for i in range(200)]
    # with one base32 character (32 values) 200 people must collide; codes grow until unique
    table = code_table(ids, "k", length=1)
    assert len(set(table.values())) == len(ids)
    lengths = {len(c) for c in table.values()}
    assert len(lengths) == 1 and lengths.pop() > len("P-") + 1


def test_without_key_a_warning_is_given() -> None:
    people = pd.DataFrame({"person_id": ["E1"]})
    code, warning = make_coder(people, None, "MY_KEY_VAR")
    assert warning is not None and warning.level == "warning"
    assert "MY_KEY_VAR" in warning.message and "linked across builds" in warning.message
    assert code("E1") == "P-" + digest32(privacy.BUILTIN_KEY, "E1")[:8]
    assert make_coder(people, "", "K")[1] is not None


def test_small_groups_counts_distinct_people() -> None:
    people = pd.DataFrame({"person_id": ["a", "b", "c", "d", "e", "e"],
                           "group": ["G1", "G1", "G1", "G2", "G2", "G2"]})
    assert small_groups(people, 3) == frozenset({"G2"})
    assert small_groups(people, 2) == frozenset()
    assert small_groups(people, 4) == frozenset({"G1", "G2"})


def test_redactor_uses_word_boundaries() -> None:
    people = pd.DataFrame({"person_id": ["E1", "E10"], "name": ["Ann Example", ""],
                           "birth_date": pd.to_datetime(["1980-05-01", None])})
    code, _ = make_coder(people, "k")
    clean = redactor(people, code)
    out = clean("E10 and E1 (Ann Example, born 1980-05-01) but not E100 or XE1")
    assert code("E10") in out and code("E1") in out
    assert "Ann Example" not in out and "1980-05-01" not in out
    assert "E100" in out and "XE1" in out
    assert re.search(r"(?<![\w-])E1(?![\w-])", out) is None



def test_redactor_prefers_the_longest_known_id_or_name() -> None:
    # ids, names and dates that share prefixes: the longest whole word known is replaced (common practice)
    people = pd.DataFrame({"person_id": ["E1", "E12", "E1-2", "AB"], "name": ["Ann", "Ann Example", "Anna", ""],
                           "birth_date": pd.to_datetime(["1980-05-01", "1980-05-02", None, None])})
    code, _ = make_coder(people, "k")
    clean = redactor(people, code)
    assert clean("E12, E1-2, E1 and E123") == f"{code('E12')}, {code('E1-2')}, {code('E1')} and E123"
    assert clean("Ann Example met Anna and Ann Exam") == \
        "[name withheld] met [name withheld] and [name withheld] Exam"
    assert clean("1980-05-02/1980-05-01 not 1980-05-012") == "[date withheld]/[date withheld] not 1980-05-012"
    assert clean("ABE AB-1 AB.") == f"ABE AB-1 {code('AB')}."
    # the same text gives the same result from the cache, and non-text values are read as text
    assert clean("E1") == clean("E1") == code("E1") and clean(12) == "12"

def _people_rows(root: Path) -> list[dict[str, str]]:
    with open(root / "data" / "people.csv", encoding="utf-8-sig", newline="") as fh:
        return list(csv.DictReader(fh))


def test_built_example_carries_no_personal_data(built_example) -> None:
    rows = _people_rows(built_example.root)
    assert rows
    ids = sorted({r["person_id"] for r in rows if r["person_id"]}, key=lambda s: (-len(s), s))
    names = sorted({r.get("name", "").strip() for r in rows if r.get("name", "").strip()})
    births = sorted({r.get("birth_date", "") for r in rows
                     if re.fullmatch(r"\d{4}-\d{2}-\d{2}", r.get("birth_date", ""))})
    id_re = re.compile(r"(?<![A-Za-z0-9_-])(" + "|".join(map(re.escape, ids)) + r")(?![A-Za-z0-9_-])")
    from plotly.offline import get_plotlyjs
    scanned = 0
    for path in built_example.files():
        rel = path.relative_to(built_example.out).as_posix()
        if rel == "assets/plotly.min.js":
            # the vendor library, copied verbatim
            assert path.read_text(encoding="utf-8") == get_plotlyjs()
            continue
        text = path.read_text(encoding="utf-8")
        scanned += 1
        hit = id_re.search(text)
        assert hit is None, f"{rel} shows the raw person id {hit.group(1)!r}"
        for name in names:
            assert name not in text, f"{rel} shows the name {name!r}"
        for day in births:
            assert day not in text, f"{rel} shows the birth date {day!r}"
    assert scanned > 3


def test_built_example_has_no_restricted_pages(built_example) -> None:
    assert not built_example.report.restricted
    assert not any(p.restricted for p in built_example.context.pages
                   if (built_example.out / f"{p.slug}.html").exists())


@pytest.mark.parametrize("restricted", [False, True])
def test_export_codes_person_ids_unless_restricted(tmp_path: Path, restricted: bool) -> None:
    from generator.export import export_files
    from generator.build import prepare
    from tests.conftest import TEST_KEY, env
    from tests.progkit import make_programme
    noise = [{"measurement_id": "M1", "date": "2025-03-04", "kind": "personal", "person_id": "E001",
              "group": "G1", "duration_h": 8, "laeq": 88.0}]
    root = make_programme(tmp_path / "p", files={"noise.csv": noise})
    with env(HCPSITE_ID_KEY=TEST_KEY):
        ctx = prepare(root, restricted=restricted)
        files = export_files(ctx)
    text = files["exposure_results.csv"].decode()
    assert ("E001" in text) is restricted
    assert (ctx.code("E001") in text) is not restricted


def test_example_export_carries_no_raw_ids(built_example) -> None:
    from generator.export import export_files
    rows = _people_rows(built_example.root)
    ids = sorted({r["person_id"] for r in rows if r["person_id"]}, key=lambda s: (-len(s), s))
    id_re = re.compile(r"(?<![A-Za-z0-9_-])(" + "|".join(map(re.escape, ids)) + r")(?![A-Za-z0-9_-])")
    from tests.progkit import export_texts
    files = export_files(built_example.context)
    assert {"exposure_results.csv", "hearing_results.csv", "actions.csv", "summary.json", "results.xlsx"} <= set(files)
    for name, text in sorted(export_texts(files).items()):
        hit = id_re.search(text)
        assert hit is None, f"{name} shows the raw person id {hit.group(1)!r}"


def test_codes_of_every_length_are_the_digest_prefix() -> None:
    # the codes are encoded for all people at once: each must still be its own HMAC's base32 text (RFC 4648)
    ids = ["E1", "E2", "Ann Example", "ü-9"]
    for n in range(6, 53):
        table = code_table(ids, "k", length=n)
        n_got = len(next(iter(table.values()))) - 2
        assert table == {p: "P-" + digest32("k", p)[:n_got] for p in ids}
        assert n_got >= n


def test_many_macs_match_rfc4231_and_the_standard_library() -> None:
    # RFC 4231 section 4.3 (test case 2) and 4.7 (test case 6: a 131-byte key, hashed first)
    from generator.privacy import hmac_sha256_many
    import hmac
    import random

    assert hmac_sha256_many(RFC4231_KEY.encode(), [RFC4231_DATA.encode()])[0].hex() == RFC4231_MAC
    long_key = b"\xaa" * 131
    assert hmac_sha256_many(long_key, [b"Test Using Larger Than Block-Size Key - Hash Key First"])[0].hex() == \
        "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54"
    # Python's hmac module as the oracle, keys shorter than, equal to and longer than the 64-byte block
    rng = random.Random(4231)
    for size in (0, 1, 20, 63, 64, 65, 200):
        key = bytes(rng.randrange(256) for _ in range(size))
        messages = [bytes(rng.randrange(256) for _ in range(rng.randrange(0, 90))) for _ in range(30)]
        assert hmac_sha256_many(key, messages) == [hmac.digest(key, m, "sha256") for m in messages]
