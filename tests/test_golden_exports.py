"""The exports of site_example stay byte for byte what they were: a change of any computed
figure, column or wording in them shows here first.

The digests in tests/golden/site_example_exports.sha256 are the sha256 of each file that
``hcpsite export site_example`` writes (public and --restricted), built with the tests'
fixed SOURCE_DATE_EPOCH and person-code key. When a change of results is intended, write
them anew and commit them with the change that explains it:

    python -m tests.test_golden_exports --write
"""
from __future__ import annotations

import hashlib
import sys
from pathlib import Path

from tests.conftest import EXAMPLE, FIXED_EPOCH, TEST_KEY, env

GOLDEN = Path(__file__).resolve().parent / "golden" / "site_example_exports.sha256"


def digests() -> dict[str, str]:
    """Return 'public/<file>' and 'restricted/<file>' -> sha256 of site_example's exports."""
    from generator.build import prepare
    from generator.export import export_files
    out: dict[str, str] = {}
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        for kind, restricted in (("public", False), ("restricted", True)):
            for name, data in export_files(prepare(EXAMPLE, restricted=restricted)).items():
                out[f"{kind}/{name}"] = hashlib.sha256(data).hexdigest()
    return dict(sorted(out.items()))


def read_golden() -> dict[str, str]:
    lines = GOLDEN.read_text(encoding="utf-8").splitlines()
    return {name: digest for digest, name in (line.split("  ", 1) for line in lines if line.strip())}


def test_site_example_exports_are_unchanged() -> None:
    got, want = digests(), read_golden()
    changed = sorted(k for k in set(got) | set(want) if got.get(k) != want.get(k))
    assert not changed, (f"exports differ from tests/golden: {changed}; if the change is intended, run "
                         "'python -m tests.test_golden_exports --write' and commit the digests with it")


if __name__ == "__main__":
    if sys.argv[1:] != ["--write"]:
        sys.exit("usage: python -m tests.test_golden_exports --write")
    GOLDEN.write_text("".join(f"{d}  {n}\n" for n, d in digests().items()), encoding="utf-8")
    print(f"wrote {GOLDEN}")
