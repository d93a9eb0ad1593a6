"""Small hostile inputs, and the walk the fuzzers mutate with, shared by the tests and bench/."""

from __future__ import annotations


def yaml_alias_bomb() -> str:
    """Nine levels of nine aliases: 9**9 strings once expanded, from about 450 bytes."""
    lines = ['a: &a ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]']
    for prev, name in zip("abcdefgh", "bcdefghi"):
        lines.append(f"{name}: &{name} [" + ",".join([f"*{prev}"] * 9) + "]")
    return '- Plan:\n    Node Type: "Seq Scan"\n    Plan Rows: 1\n    X:\n' + "\n".join(
        "      " + line for line in lines) + "\n"


def yaml_merge_bomb() -> str:
    """Merge keys over aliases, each level merging the one below twice: exponential time."""
    lines = ["      l0: &l0 {k0: 1, k1: 2}"]
    lines += [f"      l{i}: &l{i} {{<<: [*l{i - 1}, *l{i - 1}], m{i}: 1}}" for i in range(1, 26)]
    return '- Plan:\n    Node Type: "Seq Scan"\n    Plan Rows: 1\n    X:\n' + "\n".join(lines) + "\n"


def json_objects(doc) -> list[dict]:
    """Every JSON object in a decoded document, without recursion: what a mutation may pick."""
    objects, todo = [], [doc]
    while todo:
        item = todo.pop()
        if isinstance(item, dict):
            objects.append(item)
            todo.extend(item.values())
        elif isinstance(item, list):
            todo.extend(item)
    return objects
