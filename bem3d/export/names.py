"""Conductor names made safe for each output format, one function per format.

Names come from Gmsh physical names and file stems, so they may hold anything: commas, quotes,
newlines, markup, escape sequences, a leading '=' or SPICE's reserved node names.
"""

import csv
import html
import io
import re

#: Control characters (C0, DEL, C1) and the bidirectional overrides that reorder what a
#: terminal shows.
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u200e\u200f\u202a-\u202e\u2066-\u2069]")
#: Cell starts that spreadsheets read as a formula (common practice, no source).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
#: Node names a SPICE netlist already gives a meaning: ground, and the subcircuit's reference.
RESERVED_NODES = ("0", "GND", "REF")


def terminal_text(text, keep=""):
    """text with every control character not in `keep` written as a visible escape (\\x1b)."""
    return _CONTROL.sub(lambda m: m.group() if m.group() in keep
                        else m.group().encode("unicode_escape").decode("ascii"), str(text))


def csv_cell(text):
    """A text cell that no spreadsheet takes for a formula: a leading = + - @ tab or CR gets
    a ' in front (quoting of commas, quotes and newlines is left to the csv module)."""
    text = str(text)
    return "'" + text if text.startswith(_FORMULA_START) else text


def csv_text(rows):
    """CSV of rows (lists of str cells) per RFC 4180: CRLF line ends, a cell holding a comma,
    quote, CR or LF quoted, quotes doubled. Pass name cells through csv_cell first."""
    out = io.StringIO()
    # the csv module quotes only the characters of its line terminator: CRLF covers both
    csv.writer(out, lineterminator="\r\n").writerows(rows)
    return out.getvalue()


def xml_attribute(text):
    """text escaped for an XML attribute value (VTK array names); control characters, which
    XML 1.0 does not allow even escaped, become visible escapes."""
    return html.escape(terminal_text(text), quote=True)


def spice_node(name):
    """A name reduced to the characters every SPICE accepts as a node or subcircuit name."""
    node = re.sub(r"[^A-Za-z0-9_]", "_", str(name))
    return node if node and not node.isdigit() else f"n{node}"


def spice_nodes(names):
    """One SPICE node name per conductor: unique ignoring case (SPICE ignores it), never one of
    RESERVED_NODES; a name that would clash gets _2, _3, ... in matrix order."""
    taken = {n.lower() for n in RESERVED_NODES}
    nodes = []
    for name in names:
        base = node = spice_node(name)
        count = 1
        while node.lower() in taken:
            count += 1
            node = f"{base}_{count}"
        taken.add(node.lower())
        nodes.append(node)
    return nodes
