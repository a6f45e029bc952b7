"""26 synthetic diffs at two sizes: `modeldiff diff` output (JSON and text) and exit code under two trees, compared.

    python benchmarks/same_output.py OLD_TREE NEW_TREE

Each tree is a folder holding a `modeldiff` package (for example `git archive COMMIT modeldiff | tar -x -C
/tmp/before`); each command runs in a fresh process with that folder first on PYTHONPATH and the cache off.
Prints every scenario whose output differs and a count; exits 1 when any differs. Used to show that a
speed change leaves the output byte for byte as it was (docs/performance.md).
"""
import os
import re
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from synth import synthetic_model_text  # noqa: E402

D = tempfile.mkdtemp(prefix="modeldiff-same-output-")
def sub1(t, a, b):
    assert a in t, a
    return t.replace(a, b, 1)
def scenarios(size):
    base = synthetic_model_text(**size)
    yield 'flip', base, synthetic_model_text(flip='l0', **size)
    m = re.search(r"\n  (l\d+):\n[^\n]*\n[^\n]*\n    flow: two-way", base)
    yield 'unflip', base, synthetic_model_text(flip=m.group(1), **size)
    yield 'same', base, base
    yield 'link_removed', base, re.sub(r"\n  l1:\n[^\n]*\n[^\n]*", "", base, 1)
    yield 'standby', base, sub1(base, "  l2:\n", "  l2:\n    standby: true\n")
    yield 'measure_expr', base, sub1(base, "  m0:\n    table: fact_0\n    expr: sum(amount)", "  m0:\n    table: fact_0\n    expr: sum(qty)")
    yield 'measure_where', base, sub1(base, "  m1:\n", "  m1:\n    where: qty > 1\n")
    yield 'measure_added', base, sub1(base, "roles:\n", "  m_new:\n    table: fact_0\n    expr: sum(amount)\nroles:\n")
    yield 'measure_removed', base, re.sub(r"\n  m3:\n[^\n]*\n[^\n]*", "", base, 1)
    yield 'measure_flow', base, sub1(base, "  m2:\n", "  m2:\n    flow: {l0: two-way}\n")
    yield 'role_filter', base, sub1(base, "  r0:\n    filters:\n      ", "  r0:\n    filters:\n      dim_1: region = 'X'\n      ")
    yield 'column_type', base, sub1(base, "      amount: decimal", "      amount: text")
    yield 'key_column', base, sub1(base, "    key: id\n    columns:\n      id: integer\n      label: text", "    key: label\n    columns:\n      id: integer\n      label: text")
    yield 'table_renamed', base, base.replace("dim_5:", "dim_five:").replace("dim_5.", "dim_five.")
    yield 'table_removed', base, re.sub(r"\n  dim_7:\n(    [^\n]*\n|      [^\n]*\n)*", "\n", base, 1)
    yield 'security_flow', base, sub1(base, "  l3:\n", "  l3:\n    security_flow: two-way\n")
    yield 'broken_ref', base, sub1(base, "    expr: sum(qty)", "    expr: sum(nosuch)")
    yield 'broken_measure', base, re.sub(r"(\n  m\d+:\n    expr: )(m\d+)", r"\1missing_m", base, 1)
    yield 'report_changed', base, sub1(base, "  p0:\n", "  p0:\n    description: x\n")
    yield 'comment_only', base, sub1(base, "links:\n", "links:\n# links below\n")
    yield 'respelled', base, sub1(base, "  l0:\n", "  l0: \n")
    yield 'swap_order', base, base.replace("  r0:", "  rX:").replace("  r1:", "  r0:").replace("  rX:", "  r1:")
    yield 'many', base, synthetic_model_text(flip='l5', **size).replace("sum(amount)", "sum(qty)", 30)
    yield 'reverse', synthetic_model_text(flip='l0', **size), base
    yield 'bad_yaml', base, sub1(base, "  l0:\n", "  l0: [\n")
    yield 'dup_name', base, sub1(base, "  l1:\n", "  l0:\n    from: a.b\n    to: c.d\n  l1:\n")
SIZES = {'small': dict(tables=60, links=90, measures=400, roles=10), 'big': {}}
def main():
    trees = sys.argv[1:]
    bad = 0; n = 0
    for sname, size in SIZES.items():
        for name, old, new in scenarios(size):
            a, b = f'{D}/{sname}_{name}_a.model.yaml', f'{D}/{sname}_{name}_b.model.yaml'
            open(a, 'w').write(old); open(b, 'w').write(new)
            for fmt in ('json', 'text'):
                outs = []
                for tree in trees:
                    env = dict(os.environ, PYTHONPATH=tree, MODELDIFF_NO_CACHE='1', COLUMNS='100')
                    p = subprocess.run([sys.executable, '-m', 'modeldiff', 'diff', a, b, '--format', fmt], env=env, capture_output=True, cwd=tree)
                    outs.append((p.returncode, p.stdout, p.stderr))
                n += 1
                if outs[0] != outs[1]:
                    bad += 1; print('DIFFERS', sname, name, fmt, [o[0] for o in outs], [len(o[1]) for o in outs], outs[0][2][-300:], outs[1][2][-300:])
    print(n, 'outputs compared,', bad, 'differ')
    return 1 if bad else 0


if __name__ == '__main__':
    sys.exit(main())
