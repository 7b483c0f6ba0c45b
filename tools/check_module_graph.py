#!/usr/bin/python3
"""Checks that #include lines follow gyre's module graph (DEVELOPERS.md "Layout").

The graph is read from src/CMakeLists.txt (`gyre_module(NAME PUBLIC_DEPS gyre_a gyre_b ...)`, plus
the runtime, which depends on nothing). A file of module M (include/gyre/M/..., src/M/...) may
include the public headers of M and of the modules M depends on, directly or through others
(include/gyre/X/... of such an X), and the private headers (src/X/...) of M only. The runtime's
public headers use the standard library only. src/cli and src/gyre.cpp sit on top and may include
any public header. Exit code 0 when every include follows the graph, 1 with one line per
violation otherwise, 2 on bad usage.

    /usr/bin/python3 tools/check_module_graph.py [SOURCE_DIR]     # run by ctest ("module graph")
    /usr/bin/python3 tools/check_module_graph.py --self-test      # the checker catches violations
"""
import os
import re
import sys
import tempfile

INCLUDE = re.compile(r'^\s*#\s*include\s*"([^"]+)"')
SYSTEM_INCLUDE = re.compile(r'^\s*#\s*include\s*<([^>]+)>')
MODULE = re.compile(r'gyre_module\(\s*(\w+)((?:\s+[^)]*)?)\)')
SOURCE_ENDINGS = (".cpp", ".hpp", ".h", ".c")
# Third-party headers the C++17 runtime's public headers must not expose to embedders.
NOT_IN_RUNTIME_API = ("Eigen/", "nlohmann/", "unicode/", "CLI/", "catch2/")


def read_graph(source_dir):
    """{module: set of direct dependencies} from src/CMakeLists.txt; the runtime has none."""
    text = open(os.path.join(source_dir, "src", "CMakeLists.txt"), encoding="utf-8").read()
    graph = {"runtime": set()}
    for name, args in MODULE.findall(text):
        deps = set()
        for word in args.split():
            if word.startswith("gyre_"):
                deps.add(word[len("gyre_"):])
        graph[name] = deps
    return graph


def closure(graph):
    """{module: every module it may use, itself included}."""
    out = {}
    for m in graph:
        seen, todo = {m}, [m]
        while todo:
            for d in graph.get(todo.pop(), ()):
                if d not in seen:
                    seen.add(d)
                    todo.append(d)
        out[m] = seen
    return out


def owner(rel_path, modules):
    """The module a file belongs to, "top" for cli and src/gyre.cpp, None for other files."""
    parts = rel_path.split("/")
    if parts[0] == "include" and len(parts) > 2 and parts[1] == "gyre" and parts[2] in modules:
        return parts[2]
    if parts[0] == "include" and parts[1] == "gyre_runtime.h":
        return "runtime"
    if parts[0] == "src" and len(parts) > 2 and parts[1] in modules:
        return parts[1]
    if parts[0] == "src" and (parts[1] == "cli" or parts[1] == "gyre.cpp"):
        return "top"
    return None


def target(include, including_module, modules):
    """(module, private?) an include names, or None for headers outside gyre's modules."""
    parts = include.split("/")
    if include == "gyre_runtime.h":
        return "runtime", False
    if parts[0] == "gyre" and len(parts) > 2 and parts[1] in modules:
        return parts[1], False
    if parts[0] == "gyre" and len(parts) == 2:
        return None  # gyre/fwd.hpp: forward declarations only
    if parts[0] in modules:
        return parts[0], True  # src/<module>/...: private to that module
    if parts[0] == "cli":
        return "top", True
    return including_module, True  # relative to the including file's directory


def check(source_dir):
    graph = read_graph(source_dir)
    allowed = closure(graph)
    modules = set(graph)
    problems = []
    for top in ("include", "src"):
        for root, _, files in os.walk(os.path.join(source_dir, top)):
            for name in sorted(files):
                if not name.endswith(SOURCE_ENDINGS):
                    continue
                path = os.path.join(root, name)
                rel = os.path.relpath(path, source_dir).replace(os.sep, "/")
                m = owner(rel, modules)
                if m is None:
                    continue
                public_runtime = m == "runtime" and rel.startswith("include/")
                for line_no, line in enumerate(open(path, encoding="utf-8", errors="replace"), 1):
                    sys_inc = SYSTEM_INCLUDE.match(line)
                    if sys_inc and public_runtime and sys_inc.group(1).startswith(NOT_IN_RUNTIME_API):
                        problems.append(f"{rel}:{line_no}: the runtime's public headers use the standard "
                                        f"library only, not <{sys_inc.group(1)}>")
                    inc = INCLUDE.match(line)
                    if not inc:
                        continue
                    t = target(inc.group(1), m, modules)
                    if t is None:
                        continue
                    to, private = t
                    if m == "top":
                        if private and to not in ("top",):
                            problems.append(f'{rel}:{line_no}: "{inc.group(1)}" is private to module {to}; '
                                            f"use its public header")
                        continue
                    if private and to != m:
                        problems.append(f'{rel}:{line_no}: "{inc.group(1)}" is private to module {to}; '
                                        f"module {m} may use only public headers (include/gyre/{to}/)")
                    elif to not in allowed[m]:
                        problems.append(f'{rel}:{line_no}: module {m} includes "{inc.group(1)}" of module {to}, '
                                        f"which it does not depend on (src/CMakeLists.txt: {m} -> "
                                        f"{', '.join(sorted(graph[m])) or 'nothing'})")
    return problems


def self_test():
    """A small tree with one allowed include and three violations; all three must be found."""
    with tempfile.TemporaryDirectory() as d:
        def write(rel, text):
            path = os.path.join(d, rel)
            os.makedirs(os.path.dirname(path), exist_ok=True)
            open(path, "w", encoding="utf-8").write(text)
        write("src/CMakeLists.txt", "gyre_module(core)\ngyre_module(text PUBLIC_DEPS gyre_core gyre_runtime)\n"
                                    "gyre_module(nn PUBLIC_DEPS gyre_core)\n")
        write("include/gyre/text/a.hpp", '#include "gyre/core/x.hpp"\n#include "gyre/runtime/r.hpp"\n')
        write("src/core/x.cpp", '#include "gyre/text/a.hpp"\n')             # core -> text: upward
        write("src/text/a.cpp", '#include "runtime/detail/json.hpp"\n')     # another module's private header
        write("include/gyre/runtime/r.hpp", "#include <nlohmann/json.hpp>\n")  # third party in the runtime API
        write("src/nn/ok.cpp", '#include "detail/buffer.hpp"\n#include "gyre/runtime/r.hpp"\n')  # nn -/-> runtime
        found = check(d)
    expected = ["src/core/x.cpp:1", "src/text/a.cpp:1", "include/gyre/runtime/r.hpp:1", "src/nn/ok.cpp:2"]
    missing = [e for e in expected if not any(p.startswith(e) for p in found)]
    extra = [p for p in found if not any(p.startswith(e) for e in expected)]
    if missing or extra:
        print("self-test failed; missed:", missing, "unexpected:", extra)
        return 1
    print(f"module graph self-test: all {len(expected)} planted violations found")
    return 0


def main(argv):
    if argv[1:] == ["--self-test"]:
        return self_test()
    if len(argv) > 2:
        print(__doc__.strip().splitlines()[-2].strip(), file=sys.stderr)
        return 2
    source_dir = argv[1] if len(argv) == 2 else os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
    problems = check(source_dir)
    for p in problems:
        print(p)
    if problems:
        print(f"module graph: {len(problems)} include(s) cross the graph the wrong way")
        return 1
    print("module graph: every include follows src/CMakeLists.txt")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
