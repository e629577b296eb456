"""hOCR and ALTO samples written by hand from the specs; boxes worked out by hand.

hOCR: the hOCR 1.2 spec, kba.github.io/hocr-spec/1.2/ (ocr_page, ocrx_word, title properties
bbox, x_wconf, image). ALTO: the ALTO v4 schema, loc.gov/standards/alto (String with HPOS, VPOS,
WIDTH, HEIGHT, CONTENT, WC; Description/MeasurementUnit pixel | mm10 | inch1200).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from PIL import Image

from dochar.data.importers import import_sources

HOCR = """<?xml version="1.0" encoding="UTF-8"?>
<html xmlns="http://www.w3.org/1999/xhtml" xml:lang="en">
 <head><meta name="ocr-capabilities" content="ocr_page ocr_line ocrx_word"/></head>
 <body>
  <div class="ocr_page" id="page_1" title='image "scan.png"; bbox 0 0 1000 800; ppageno 0'>
   <span class="ocr_line" title="bbox 100 50 400 80">
    <span class="ocrx_word" id="w1" title="bbox 100 50 220 80; x_wconf 93">Lot</span>
    <span class="ocrx_word" id="w2" title="bbox 240 52 400 80; x_wconf 71"><strong>B-536</strong></span>
   </span>
   <span class="ocrx_word" id="w3" title="bbox 950 700 1040 760">overhang</span>
   <span class="ocrx_word" id="w4" title="bbox 10 10 20 20"> </span>
  </div>
  <div class="ocr_page" id="page_2" title="bbox 0 0 500 400">
   <span class="ocrx_word" id="w5" title="bbox 60 40 10 20; x_wconf 50">reversed</span>
  </div>
 </body>
</html>
"""


def alto(namespace: str, unit: str, page: str, strings: str) -> str:
    return f"""<?xml version="1.0" encoding="UTF-8"?>
<alto xmlns="{namespace}">
 <Description><MeasurementUnit>{unit}</MeasurementUnit>
  <sourceImageInformation><fileName>scan.tif</fileName></sourceImageInformation>
 </Description>
 <Layout><Page ID="P1" PHYSICAL_IMG_NR="1" {page}><PrintSpace>
  <TextBlock ID="B1"><TextLine ID="L1">{strings}</TextLine></TextBlock>
 </PrintSpace></Page></Layout>
</alto>
"""


def write(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def boxes(table) -> list[tuple]:
    return [tuple(round(v, 4) for v in row) for row in
            table[["x0", "y0", "x1", "y1"]].itertuples(index=False)]


def test_hocr_words_boxes_confidence_and_repairs(tmp_path) -> None:
    table, summary = import_sources([write(tmp_path, "form.hocr", HOCR)])
    assert table.text.tolist() == ["Lot", "B-536", "overhang", "reversed"]
    assert table.page.tolist() == [1, 1, 1, 2]
    # w3 reaches x = 1040 on a 1000-wide page: clipped to 1000; w5's corners come swapped.
    assert boxes(table) == [(100, 50, 220, 80), (240, 52, 400, 80), (950, 700, 1000, 760),
                            (10, 20, 60, 40)]
    assert table.page_width.tolist() == [1000, 1000, 1000, 500]
    assert table.confidence.tolist()[:2] == [0.93, 0.71]            # x_wconf 0-100 -> 0-1
    assert summary.repairs["boxes clipped to the page"] == 1
    assert summary.repairs["boxes with swapped corners put in order"] == 1
    assert summary.dropped["words without text"] == 1               # w4 is blank
    assert (summary.words_read, summary.words_kept) == (5, 4)


def test_alto_v4_in_mm10_becomes_points(tmp_path) -> None:
    """mm10 = 1/10 mm; 25.4 mm = 1 inch = 72 points. A4 2100 x 2970 mm10 = 210 x 297 mm."""
    strings = ('<String ID="S1" CONTENT="Certificate" HPOS="254" VPOS="508" WIDTH="127" '
               'HEIGHT="50.8" WC="0.96"/><SP/>'
               '<String ID="S2" CONTENT="No." HPOS="400" VPOS="508" WIDTH="60" HEIGHT="50.8"/>')
    path = write(tmp_path, "cert.xml", alto("http://www.loc.gov/standards/alto/ns-v4#", "mm10",
                                            'WIDTH="2100" HEIGHT="2970"', strings))
    table, _ = import_sources([path])
    # S1: 25.4 mm -> 72 pt, 50.8 mm -> 144 pt, width 12.7 mm -> 36 pt, height 5.08 mm -> 14.4.
    # S2: 40 mm = 40 / 25.4 in = 113.3858 pt; width 6 mm = 17.0079 pt.
    assert boxes(table) == [(72.0, 144.0, 108.0, 158.4),
                            (113.3858, 144.0, round(113.3858 + 17.0079, 4), 158.4)]
    assert table.page_width.iloc[0] == pytest.approx(210 / 25.4 * 72)    # 595.28 pt
    assert table.page_height.iloc[0] == pytest.approx(297 / 25.4 * 72)   # 841.89 pt
    assert table.confidence.iloc[0] == 0.96 and table.text.tolist() == ["Certificate", "No."]


def test_alto_inch1200_and_v2_pixel(tmp_path) -> None:
    inch = write(tmp_path, "a.xml", alto("http://www.loc.gov/standards/alto/ns-v3#", "inch1200",
                                         'WIDTH="9600" HEIGHT="12000"',
                                         '<String CONTENT="Lot" HPOS="1200" VPOS="600" '
                                         'WIDTH="300" HEIGHT="150"/>'))
    pixel = write(tmp_path, "b.xml", alto("http://www.loc.gov/standards/alto/ns-v2#", "pixel",
                                          'WIDTH="1700" HEIGHT="2200"',
                                          '<String CONTENT="Lot" HPOS="10" VPOS="20" '
                                          'WIDTH="30" HEIGHT="15"/>'))
    table, _ = import_sources([inch, pixel])
    # inch1200: 1200 -> 1 in -> 72 pt; 600 -> 36; 300 -> 18; 150 -> 9; page 8 x 10 in.
    assert boxes(table) == [(72.0, 36.0, 90.0, 45.0), (10.0, 20.0, 40.0, 35.0)]
    assert table.page_width.tolist() == [576.0, 1700.0]
    assert table.page_height.tolist() == [720.0, 2200.0]


def test_alto_page_size_from_the_image_inside_the_folder_only(tmp_path) -> None:
    inner = tmp_path / "inner"
    inner.mkdir()
    Image.new("L", (640, 480), 255).save(inner / "scan.tif")
    word = '<String CONTENT="Lot" HPOS="10" VPOS="20" WIDTH="30" HEIGHT="15"/>'
    table, _ = import_sources([write(inner, "ok.xml", alto(
        "http://www.loc.gov/standards/alto/ns-v4#", "pixel", "", word))])
    assert (table.page_width.iloc[0], table.page_height.iloc[0]) == (640.0, 480.0)

    escaping = alto("http://www.loc.gov/standards/alto/ns-v4#", "pixel", "", word).replace(
        "scan.tif", "../inner/../../etc/passwd")
    table, summary = import_sources([write(inner, "escape.xml", escaping)])
    assert "outside the file's folder" in str(summary.problems[0])
    assert (table.page_width.iloc[0], table.page_height.iloc[0]) == (40.0, 35.0)  # word extent
    assert summary.repairs["page sizes taken from the extent of their words"] == 1


def test_hocr_image_outside_the_folder_is_not_opened(tmp_path) -> None:
    (tmp_path / "sub").mkdir()
    Image.new("L", (640, 480), 255).save(tmp_path / "outside.png")
    text = HOCR.replace("image \"scan.png\"; bbox 0 0 1000 800", "image \"../outside.png\"")
    table, summary = import_sources([write(tmp_path / "sub", "f.hocr", text)])
    assert any("outside the file's folder" in p.message and p.page == 1
               for p in summary.problems)
    assert table.page_width.iloc[0] == 1040.0        # the words' extent, not the image's 640


def test_malformed_xml_a_non_image_and_a_truncated_image_are_located(tmp_path) -> None:
    # Line numbers counted by hand: the cut falls inside line 10 (w3); the bad attribute sits
    # on line 7 of the ALTO template, after its 59 characters.
    cut = write(tmp_path, "cut.hocr", HOCR[: HOCR.index("id=\"w3\"")])
    broken = write(tmp_path, "broken.xml", alto("http://www.loc.gov/standards/alto/ns-v4#",
                                                "pixel", "", "<String CONTENT='a' </String>"))
    other = write(tmp_path, "other.xml", '<?xml version="1.0"?><alto xmlns="urn:x"/>')
    (tmp_path / "photo.png").write_bytes(b"not really a picture")
    Image.new("L", (200, 100), 255).save(tmp_path / "whole.png")
    (tmp_path / "half.png").write_bytes((tmp_path / "whole.png").read_bytes()[:60])
    good = write(tmp_path, "good.hocr", HOCR)
    table, summary = import_sources([cut, broken, other, tmp_path / "photo.png",
                                     tmp_path / "half.png", good])
    assert set(table.doc_id) == {"good"}
    reported = {Path(p.source).name: str(p) for p in summary.problems}
    assert "malformed XML" in reported["cut.hocr"] and ", line 10, " in reported["cut.hocr"]
    assert "malformed XML" in reported["broken.xml"] and ", line 7, column 60" in reported["broken.xml"]
    assert "not ALTO v2-v4" in reported["other.xml"]
    assert "not an image" in reported["photo.png"]
    assert "unreadable" in reported["half.png"] and "page 1" in reported["half.png"]


def test_the_page_image_a_file_names_is_recorded_only_when_it_is_there(tmp_path) -> None:
    """hOCR's ``image`` and ALTO's ``fileName`` become ``page_image`` (absolute) when the file
    exists inside the file's folder: the picture a report draws the predictions over. A missing
    or escaping image is recorded as none (the hOCR specification and ALTO v4 schema cited
    above)."""
    Image.new("L", (1000, 800), 255).save(tmp_path / "scan.png")
    Image.new("L", (640, 480), 255).save(tmp_path / "scan.tif")
    word = '<String CONTENT="Lot" HPOS="10" VPOS="20" WIDTH="30" HEIGHT="15"/>'
    table, _ = import_sources([write(tmp_path, "form.hocr", HOCR), write(
        tmp_path, "cert.xml", alto("http://www.loc.gov/standards/alto/ns-v4#", "pixel", "",
                                   word))])
    images = table.groupby(["doc_id", "page"])["page_image"].first()
    assert sorted(images.tolist()) == sorted(["", str((tmp_path / "scan.png").resolve()),
                                              str((tmp_path / "scan.tif").resolve())])
    # the hOCR's second page names no image
    assert images[images == ""].index.get_level_values("page").tolist() == [2]

    (tmp_path / "scan.png").unlink()
    table, _ = import_sources([write(tmp_path, "form.hocr", HOCR)])
    assert set(table["page_image"]) == {""}
