"""The configuration reference (docs/configuration.md) against the parsers.

Every key the YAML parsers accept must have a row in the reference's tables,
and every row must name a key they accept:

  - "Keys" against lib/config/config.cpp (the daemon's config);
  - "Scenario files" against lib/config/scenario.cpp (simulate --scenario).

The accepted keys are read from the parsers' source: each section is a
Read* function whose MapReader is made with `v.Map({...})` (the list of
allowed keys; an unknown key is an error), and a MapReader made inside it
from a key's value (`x->Map({...})` with `auto x = m.Get("anneal")`) is a
subsection under that key. SECTIONS below says which dotted path each Read*
function reads (`feeds[]` is each entry of the `feeds` list); a new Read*
function with a Map() makes this test fail until it is added there.

Standard library only; run by ctest under /usr/bin/python3 (label `unit`).
"""

import os
import re
import unittest

ROOT = os.environ.get("LYAPCAST_SOURCE_DIR") or os.path.normpath(
    os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))
REFERENCE = "docs/configuration.md"

# Read* function -> the dotted path of the mapping it reads.
SECTIONS = {
    "lib/config/config.cpp": {
        "ReadRoot": "",
        "ReadListen": "listen",
        "ReadLimits": "limits",
        "ReadStorage": "storage",
        "ReadAuth": "auth",
        "ReadTraining": "training",
        "ReadFeed": "feeds[]",
        "ReadDynamics": "feeds[].dynamics",
        "ReadConstraint": "feeds[].dynamics.constraints[]",
        "ReadModel": "feeds[].model",
        "ReadRetrain": "feeds[].retrain",
        "ReadMonitor": "feeds[].monitor",
        "ReadHealth": "feeds[].health",
        "ReadChannelQuality": "feeds[].quality.<channel>",
    },
    "lib/config/scenario.cpp": {
        "ReadRoot": "",
        "ReadFeed": "feeds[]",
    },
}

# Which table of the reference documents which parser.
TABLES = {"lib/config/config.cpp": "Keys", "lib/config/scenario.cpp": "Scenario files"}


# --------------------------------------------------------------- C++ source

def lex(src):
    """Returns (clean, masked), both as long as `src`: `clean` has comments
    blanked; `masked` also has the insides of string and character literals
    replaced by 'x', so structure (braces, parentheses) can be matched on it
    while literals are read from `clean` at the same offsets."""
    clean, masked = list(src), list(src)
    i, n = 0, len(src)
    while i < n:
        c = src[i]
        if src.startswith("//", i):
            j = src.find("\n", i)
            j = n if j < 0 else j
            for k in range(i, j):
                clean[k] = masked[k] = " "
            i = j
        elif src.startswith("/*", i):
            j = src.find("*/", i + 2)
            j = n if j < 0 else j + 2
            for k in range(i, j):
                if src[k] != "\n":
                    clean[k] = masked[k] = " "
            i = j
        elif c == "R" and src.startswith('R"', i):  # raw string R"d(...)d"
            open_paren = src.index("(", i)
            delim = src[i + 2:open_paren]
            j = src.index(")" + delim + '"', open_paren) + len(delim) + 2
            for k in range(i + 2, j - 1):
                masked[k] = "x"
            i = j
        elif c in "\"'":
            j = i + 1
            while j < n and src[j] != c:
                j += 2 if src[j] == "\\" else 1
            for k in range(i + 1, j):
                masked[k] = "x"
            i = j + 1
        else:
            i += 1
    return "".join(clean), "".join(masked)


def matching(masked, open_at):
    """Index of the bracket closing the one at `open_at`."""
    pairs = {"(": ")", "{": "}", "[": "]"}
    opener, closer = masked[open_at], pairs[masked[open_at]]
    depth = 0
    for k in range(open_at, len(masked)):
        if masked[k] == opener:
            depth += 1
        elif masked[k] == closer:
            depth -= 1
            if depth == 0:
                return k
    raise ValueError(f"unbalanced {opener} at offset {open_at}")


def literals(clean, masked, begin, end):
    """String literals between two offsets, in order."""
    return [clean[begin + m.start() + 1:begin + m.end() - 1] for m in re.finditer(r'"x*"', masked[begin:end])]


class Source:
    def __init__(self, rel):
        self.rel = rel
        with open(os.path.join(ROOT, rel), encoding="utf-8") as f:
            self.clean, self.masked = lex(f.read())
        self.functions = {}  # name -> (params_begin, params_end, body_begin, body_end)
        # Definitions start at column 0 (the code is not indented inside its
        # namespaces): a return type, the name, the parameters, then '{'.
        for m in re.finditer(r"^[A-Za-z][^;{}()]*?\b(\w+)\s*\(", self.masked, re.M):
            p_open = m.end() - 1
            p_close = matching(self.masked, p_open)
            rest = re.match(r"\s*(?:const\s*)?(?:noexcept\s*)?\{", self.masked[p_close + 1:])
            if rest:
                b_open = p_close + rest.end()
                self.functions.setdefault(m.group(1), (p_open, p_close, b_open, matching(self.masked, b_open)))

    def lines(self, offset):
        return self.masked.count("\n", 0, offset) + 1

    def key_list(self, arg_begin, arg_end, where):
        """The keys of a Map(...) argument: a braced list of literals, or a
        call of a function of this file that returns them (directly or from
        a `kName[] = {...}` array)."""
        arg = self.masked[arg_begin:arg_end].strip()
        if arg.startswith("{"):
            return literals(self.clean, self.masked, arg_begin, arg_end)
        call = re.fullmatch(r"(\w+)\s*\(\s*\)", arg)
        if call and call.group(1) in self.functions:
            _, _, b, e = self.functions[call.group(1)]
            keys = literals(self.clean, self.masked, b, e)
            if keys:
                return keys
            for name in re.findall(r"\b(k\w+)\b", self.masked[b:e]):
                array = re.search(r"\b" + name + r"\s*\[\s*\]\s*=\s*\{", self.masked)
                if array:
                    close = matching(self.masked, array.end() - 1)
                    return literals(self.clean, self.masked, array.end() - 1, close)
        raise AssertionError(f"{self.rel}:{where}: cannot read the key list of Map({arg}); teach "
                             f"tests/docs/test_config_reference.py this form")

    def accepted(self, sections):
        """{dotted key: 'file:line (function)'} for every key the parser
        accepts, and a list of problems found on the way."""
        keys, problems = {}, []
        for fn, (p_open, p_close, b_open, b_close) in self.functions.items():
            body = self.masked[b_open:b_close]
            maps = list(re.finditer(r"(?:MapReader\s+(\w+)\s*=\s*)?\b(\w+)\s*(?:\.|->)\s*Map\s*\(", body))
            if not maps:
                continue
            if fn not in sections:
                problems.append(f"{self.rel}:{self.lines(b_open)}: {fn} reads a mapping (Map(...)) but "
                                f"SECTIONS in tests/docs/test_config_reference.py does not say which config "
                                f"path it reads; add it there")
                continue
            param = re.search(r"const\s+Value\s*&\s*(\w+)", self.masked[p_open:p_close])
            readers = {}  # reader variable -> (path, allowed keys)
            for m in maps:
                reader, receiver = m.group(1), m.group(2)
                a_open = b_open + m.end() - 1
                where = self.lines(a_open)
                allowed = self.key_list(a_open + 1, matching(self.masked, a_open), where)
                if param and receiver == param.group(1):
                    path = sections[fn]
                else:
                    # A subsection: `auto x = r.Get("key")` with r a reader of this function.
                    bind = None
                    for b in re.finditer(r"\bauto\s+" + receiver + r"\s*=\s*(\w+)\s*\.\s*(?:Get|Require)\s*\(\s*\"x*\"",
                                         body[:m.start()]):
                        bind = b
                    if bind is None or bind.group(1) not in readers:
                        problems.append(f"{self.rel}:{where}: {fn}: cannot tell which key {receiver}->Map(...) "
                                        f"reads; teach tests/docs/test_config_reference.py this form")
                        continue
                    key = literals(self.clean, self.masked, b_open + bind.start(), b_open + bind.end())[-1]
                    path = join(readers[bind.group(1)][0], key)
                for k in allowed:
                    keys.setdefault(join(path, k), f"{self.rel}:{where} ({fn})")
                if reader:
                    readers[reader] = (path, allowed)
            # Keys read by name must be in their reader's allowed list (else
            # the parser refuses them as unknown before reading them).
            for reader, (path, allowed) in readers.items():
                for g in re.finditer(r"\b" + reader + r"\s*\.\s*(?:Get|Require)\s*\(\s*\"x*\"", body):
                    key = literals(self.clean, self.masked, b_open + g.start(), b_open + g.end())[-1]
                    if key not in allowed:
                        problems.append(f"{self.rel}:{self.lines(b_open + g.start())}: {fn} reads '{key}' but "
                                        f"its Map() list does not allow it")
        for fn in sections:
            if fn not in self.functions:
                problems.append(f"{self.rel}: SECTIONS names {fn}, which is not defined there any more")
        return keys, problems


def join(path, key):
    return f"{path}.{key}" if path else key


# ----------------------------------------------------------------- markdown

def table_rows(heading):
    """{key: line number} of the first table under `## heading`."""
    with open(os.path.join(ROOT, REFERENCE), encoding="utf-8") as f:
        lines = f.read().split("\n")
    start = next((i for i, line in enumerate(lines) if line.strip() == f"## {heading}"), None)
    if start is None:
        raise AssertionError(f'{REFERENCE} has no section "## {heading}"')
    rows, in_table = {}, False
    for i in range(start + 1, len(lines)):
        line = lines[i].strip()
        if line.startswith("## "):
            break
        if not line.startswith("|"):
            if in_table:
                break
            continue
        in_table = True
        cells = [c.strip() for c in line.strip("|").split("|")]
        m = re.fullmatch(r"`([^`]+)`", cells[0])
        if not m:
            continue  # the header and separator rows
        if m.group(1) in rows:
            raise AssertionError(f"{REFERENCE}:{i + 1}: a second row for `{m.group(1)}`")
        rows[m.group(1)] = i + 1
    if not rows:
        raise AssertionError(f'{REFERENCE}: no key rows in the table under "## {heading}"')
    return rows


# -------------------------------------------------------------------- tests

class ConfigReferenceTest(unittest.TestCase):
    def check(self, rel):
        accepted, problems = Source(rel).accepted(SECTIONS[rel])
        heading = TABLES[rel]
        rows = table_rows(heading)
        for key in sorted(set(accepted) - set(rows)):
            problems.append(f'{REFERENCE} "{heading}" has no row for `{key}`, which the parser accepts '
                            f"({accepted[key]}); add one (type, default, meaning)")
        for key in sorted(set(rows) - set(accepted)):
            problems.append(f"{REFERENCE}:{rows[key]}: the row `{key}` names a key that {rel} does not accept; "
                            f"correct or remove it")
        if problems:
            self.fail("\n" + "\n".join(problems))
        return accepted

    def test_config_keys_match_the_reference(self):
        accepted = self.check("lib/config/config.cpp")
        # The reader found the nested sections too (a guard for this test itself).
        for key in ("listen.ingest", "feeds[].retrain.iterations", "feeds[].dynamics.constraints[].anneal.mid",
                    "feeds[].health.model_age_alarm_lyapunov"):
            self.assertIn(key, accepted)

    def test_scenario_keys_match_the_reference(self):
        accepted = self.check("lib/config/scenario.cpp")
        for key in ("duration", "feeds[].feed", "feeds[].changes"):
            self.assertIn(key, accepted)


if __name__ == "__main__":
    unittest.main()
