"""The decoder's two paths through the whole ingest: the sample logs stored alike.

``tests/test_decoder.py`` holds both engines (compiled, numpy) to the reference stream
decoder record by record; here the sample logs (invented, with the generator's truth in
``sample_logs/truth.json``) go through ``ingest`` once per path, and every stored table
must come out the same, row for row and column for column, so the ingest-versus-truth
tests of ``test_ingest.py`` hold on either path.
"""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pipeline.read.stdf import native
from pipeline.read.stdf.decoder import Decoder, default_path
from tests.conftest import SAMPLES, ingest_into, truth
from tests.paths import plain


def _tables(root: Path, file_id: str) -> dict[str, pa.Table]:
    out = {}
    for d in sorted((root / "tables").iterdir()):
        for part in d.glob(f"lot=*/file_id={file_id}"):  # a log's rows, under its lot
            out[d.name] = plain(pq.read_table(part / "part-0.parquet"))  # STDF: one lot
    return out


@pytest.mark.skipif(not native.available(), reason="the _scan C extension is not built")
def test_sample_logs_store_the_same_tables_on_both_paths(tmp_path: Path,
                                                         monkeypatch: pytest.MonkeyPatch) -> None:
    stores = {}
    for path in ("c", "numpy"):
        monkeypatch.setenv("TANDEM_DECODER", path)
        stores[path] = ingest_into(tmp_path / path, SAMPLES)
        stores[path].close()
    c, numpy = stores["c"], stores["numpy"]
    assert c.file_ids == numpy.file_ids
    stdf = [n for n, f in truth()["files"].items() if n.endswith((".stdf", ".stdf.gz"))]
    assert stdf and all(n in c.file_ids for n in stdf)
    for name in stdf:
        fid = c.fid(name)
        a, b = _tables(c.store.path, fid), _tables(numpy.store.path, fid)
        assert sorted(a) == sorted(b), name
        assert {"ptr", "parts"} <= set(a), name
        for table in a:
            assert a[table].schema == b[table].schema, (name, table)
            assert a[table].to_pylist() == b[table].to_pylist(), (name, table)


def test_path_is_chosen_by_argument_then_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("TANDEM_DECODER", "numpy")
    assert default_path() == "numpy" and Decoder().path == "numpy"
    monkeypatch.delenv("TANDEM_DECODER")
    assert default_path() == ("c" if native.available() else "numpy")
    assert Decoder(path="numpy").path == "numpy"
    with pytest.raises(ValueError, match="decoder path"):
        Decoder(path="fortran")
