"""canSAS 1D XML reading (saxsnb.io.cansas_xml), without entity expansion."""

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from saxsnb.errors import SaxsError, SaxsFileError, SaxsInputError, SaxsWarning
from saxsnb.io import read_cansas_xml

Q = np.linspace(0.01, 0.25, 12)  # 1/A


def _rows(q, scale=1.0, dq=False):
    out = []
    for v in q:
        extra = f'<Qdev unit="1/A">{0.001:.6g}</Qdev>' if dq else ""
        out.append(
            f'<Idata><Q unit="1/A">{float(v)!r}</Q><I unit="1/cm">{float(scale * np.exp(-v))!r}</I>'
            f'<Idev unit="1/cm">0.05</Idev>{extra}</Idata>'
        )
    return "\n".join(out)


def _doc(entries, ns=' xmlns="urn:cansas1d:1.1"'):
    body = ""
    for k, (q, scale, T) in enumerate(entries):
        body += (
            f"<SASentry name='e{k}'><Title>frame {k}</Title><Run>{k}</Run>"
            f"<SASsample><ID>gel 4</ID><temperature unit='C'>{T}</temperature></SASsample>"
            f"<SASdata>\n{_rows(q, scale, dq=True)}\n</SASdata></SASentry>\n"
        )
    return f'<?xml version="1.0" encoding="UTF-8"?>\n<SASroot version="1.1"{ns}>\n{body}</SASroot>\n'


@pytest.mark.parametrize("ns", [' xmlns="urn:cansas1d:1.1"', ""])
def test_entries_become_frames(tmp_path, ns):
    path = tmp_path / "run.xml"
    path.write_text(_doc([(Q, 1.0, 25), (Q, 2.0, 35), (Q, 3.0, 45)], ns=ns))
    before = path.read_bytes()
    ds = read_cansas_xml(path)
    assert dict(ds.sizes) == {"frame": 3, "q": 12}
    np.testing.assert_allclose(ds.q.values, 10 * Q)  # 1/A -> 1/nm (common practice)
    np.testing.assert_allclose(ds.intensity.values[1], 2 * np.exp(-Q))
    np.testing.assert_allclose(ds.sigma.values, 0.05)
    np.testing.assert_allclose(ds.dq.values, 0.01)
    assert ds.intensity.attrs["units"] == "1/cm"
    assert ds.temperature.values.tolist() == [25.0, 35.0, 45.0] and ds.temperature.attrs["units"] == "C"
    assert ds.attrs["sample"] == "gel 4" and ds.attrs["source_files"] == ["run.xml"]
    assert ds.title.values.tolist() == ["frame 0", "frame 1", "frame 2"]
    assert path.read_bytes() == before


def test_different_grids_need_regrid(tmp_path):
    path = tmp_path / "g.xml"
    path.write_text(_doc([(Q, 1.0, 25), (Q * 1.05, 2.0, 35)]))
    with pytest.raises(SaxsInputError, match=r"g\.xml: g\.xml:SASentry\[1\].*regrid="):
        read_cansas_xml(path)
    ds = read_cansas_xml(path, regrid="first")
    assert ds.mask.values[1, 0] and not ds.mask.values[0].any()


BILLION_LAUGHS = """<?xml version="1.0"?>
<!DOCTYPE lolz [
 <!ENTITY lol "lol">
 <!ENTITY lol2 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">
 <!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;">
 <!ENTITY lol4 "&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;">
]>
<SASroot><SASentry><Title>&lol4;</Title></SASentry></SASroot>
"""

EXTERNAL = """<?xml version="1.0"?>
<!DOCTYPE r [<!ENTITY x SYSTEM "file:///etc/passwd">]>
<SASroot><SASentry><Title>&x;</Title></SASentry></SASroot>
"""


@pytest.mark.parametrize("doc", [BILLION_LAUGHS, EXTERNAL, '<!DOCTYPE SASroot SYSTEM "x.dtd"><SASroot/>'])
def test_doctype_and_entities_are_refused(tmp_path, doc):
    path = tmp_path / "evil.xml"
    path.write_text(doc)
    with pytest.raises(SaxsFileError, match="DOCTYPE or ENTITY") as info:
        read_cansas_xml(path)
    assert "evil.xml" in str(info.value)


@pytest.mark.parametrize(
    "doc, message, line",
    [
        (
            "<SASroot><SASentry>\n<SASdata><Idata><Q unit='1/A'>0.1</Q><I>x</I></Idata></SASdata>\n"
            "</SASentry></SASroot>",
            "'x', not a number",
            2,
        ),
        (
            "<SASroot>\n<SASentry>\n<SASdata><Idata><Q>0.1</Q></Idata></SASdata></SASentry></SASroot>",
            "no <I>",
            3,
        ),
        ("<SASroot><SASentry>\n<SASdata>\n</SASroot>", "not well-formed", 3),
        ("<other/>", "no <SASroot>", None),
        ("<SASroot>\n</SASroot>", "no <SASentry>", 1),
    ],
)
def test_malformed_documents_name_file_and_line(tmp_path, doc, message, line):
    path = tmp_path / "m.xml"
    path.write_text(doc)
    with pytest.raises(SaxsFileError, match=message) as info:
        read_cansas_xml(path)
    assert info.value.line == line and info.value.path == str(path)


def test_missing_q_unit(tmp_path):
    path = tmp_path / "nounit.xml"
    path.write_text(
        "<SASroot><SASentry><SASdata><Idata><Q>0.1</Q><I>1</I></Idata>"
        "<Idata><Q>0.2</Q><I>2</I></Idata></SASdata></SASentry></SASroot>"
    )
    with pytest.raises(SaxsFileError, match="q_unit="):
        read_cansas_xml(path)
    ds = read_cansas_xml(path, q_unit="1/nm")
    assert ds.attrs["sigma_estimated"] == 1 and ds.intensity.attrs["units"] == "arb"


def test_chunks(tmp_path):
    path = tmp_path / "run.xml"
    path.write_text(_doc([(Q, 1.0, 25), (Q, 2.0, 35), (Q, 3.0, 45)]))
    assert read_cansas_xml(path, chunks=2).intensity.chunks[0] == (2, 1)


_PIECES = [
    "<SASroot>",
    "</SASroot>",
    "<SASentry>",
    "</SASentry>",
    "<SASdata>",
    "</SASdata>",
    "<Idata>",
    "</Idata>",
    "<Q unit='1/A'>0.1</Q>",
    "<Q>0.2</Q>",
    "<I>5</I>",
    "<I>x</I>",
    "<Idev>0.1</Idev>",
    "<!DOCTYPE a>",
    "<!ENTITY e 'x'>",
    "&e;",
    "&amp;",
    "<?xml version='1.0'?>",
    "\n",
]


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.one_of(st.sampled_from(_PIECES), st.text(max_size=8)), max_size=25), st.binary(max_size=8))
def test_property_malformed_xml_raises_only_our_errors(tmp_path, pieces, junk):
    path = tmp_path / "m.xml"
    path.write_bytes("".join(pieces).encode("utf-8", "surrogatepass") + junk)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SaxsWarning)
        try:
            read_cansas_xml(path, q_unit="1/A")
        except SaxsError:
            pass
