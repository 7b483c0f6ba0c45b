#!/usr/bin/env python3
"""Writes tricky CSV files and what Python's csv module (strict=True) reads from them, for
tests/data/test_csv.cpp. Run with Debian's interpreter from the repository root:

    /usr/bin/python3 tools/make_csv_fixtures.py

Output: tests/fixtures/csv/<name>.csv and tests/fixtures/csv/expected.json, which holds per file
either the records (text, label, 1-based start line) or the fact that Python refuses the file.
The texts are invented (the demo scenario's appliance-repair messages); the reference is the
reading of RFC 4180 by Python's csv module, not the texts.
"""
import csv
import json
import os

OUT = os.path.join(os.path.dirname(__file__), "..", "tests", "fixtures", "csv")

# Raw bytes, so that every case is exactly what a spreadsheet or database might write.
FILES = {
    # Quoted fields holding commas, doubled quotes, LF and CRLF line breaks; CRLF record ends;
    # an empty unselected field; a UTF-8 text; a quote inside an unquoted field (literal in
    # Python); blank lines between records; a last record without a line end.
    "tricky": (
        b'id,text,label\r\n'
        b'1,"the kettle, the toaster and the hob all work",praise\r\n'
        b'2,"he said ""back on friday"" and never came",complaint\r\n'
        b'3,"first line\nsecond line of the same message",book_repair\r\n'
        b'4,"windows line break\r\ninside a quoted field",book_repair\r\n'
        b',plain text without quotes,cancel\r\n'
        b'\r\n'
        b'6,"caf\xc3\xa9 machine, model K\xc3\x96-7, needs a part",order_part\r\n'
        b'7,size 5" spanner left behind,complaint\n'
        b'\n'
        b'8,"",billing\n'
        b'9,"ends without a line break",praise'
    ),
    # Columns in another order, other names, a byte-order mark, every field quoted.
    "renamed": (
        b'\xef\xbb\xbf"category","message","when"\n'
        b'"billing","was charged twice, please refund","monday"\n'
        b'"praise","quick, friendly ""and"" tidy","tuesday"\n'
    ),
    # A quoted field that is never closed.
    "unterminated": (
        b'text,label\n'
        b'fine,praise\n'
        b'"never closed, the rest of the file is inside,billing\n'
        b'more,cancel\n'
    ),
    # Text after a closing quote.
    "after_quote": (
        b'text,label\n'
        b'"quoted"tail,praise\n'
    ),
    # A record with a field too many.
    "extra_field": (
        b'text,label\n'
        b'one,praise\n'
        b'two,cancel,surplus\n'
    ),
}

# The columns each file is read with (header names).
COLUMNS = {"renamed": ("message", "category")}


def read(path, text_column, label_column):
    with open(path, newline="", encoding="utf-8-sig") as f:
        reader = csv.reader(f, strict=True)
        try:
            header = None
            records = []
            previous_end = 0
            for row in reader:
                start = previous_end + 1
                previous_end = reader.line_num
                if not row:  # a blank line
                    continue
                if header is None:
                    header = row
                    continue
                if len(row) != len(header):
                    return {"error": "field count", "line": start}
                record = dict(zip(header, row))
                records.append({"text": record[text_column], "label": record[label_column], "line": start})
            return {"records": records}
        except csv.Error as e:
            return {"error": str(e), "line": reader.line_num}


def main():
    os.makedirs(OUT, exist_ok=True)
    expected = {}
    for name, data in FILES.items():
        path = os.path.join(OUT, name + ".csv")
        with open(path, "wb") as f:
            f.write(data)
        text_column, label_column = COLUMNS.get(name, ("text", "label"))
        result = read(path, text_column, label_column)
        result["text_column"] = text_column
        result["label_column"] = label_column
        expected[name] = result
    with open(os.path.join(OUT, "expected.json"), "w", encoding="utf-8") as f:
        json.dump(expected, f, indent=2, ensure_ascii=False, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
