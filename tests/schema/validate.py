#!/usr/bin/env python3
"""Validates YAML or JSON files against one of construe's JSON Schemas with the `jsonschema`
package, a validator independent of the Rust code that generated the schema.

    python3 tests/schema/validate.py schemas/spec.schema.json pipelines/transit/spec.yaml ...

Prints `FILE: ok` for a valid file, and for an invalid one each problem as
`FILE:LINE:COLUMN: message` (YAML files: the line and column, 1-based, of the offending key
for an unknown key, else of the offending value; JSON files: `FILE:$.json.path: message`).
Exit status: 0 all valid, 1 some invalid, 3 `jsonschema` or `yaml` (PyYAML) is not installed.
"""

import json
import re
import sys

try:
    import jsonschema
    import yaml
except ImportError as e:  # the Rust test skips with this message
    print(f"skip: {e}")
    sys.exit(3)


def node_at(root, path):
    """The YAML node at a JSON-Schema instance path (keys and indexes), or None."""
    node = root
    for step in path:
        if isinstance(node, yaml.MappingNode):
            node = next((v for k, v in node.value if k.value == step), None)
        elif isinstance(node, yaml.SequenceNode) and isinstance(step, int) and step < len(node.value):
            node = node.value[step]
        else:
            return None
        if node is None:
            return None
    return node


def key_node(mapping, key):
    if isinstance(mapping, yaml.MappingNode):
        return next((k for k, _ in mapping.value if k.value == key), None)
    return None


def unexpected_keys(error):
    """The keys an `additionalProperties: false` error is about."""
    schema, instance = error.schema, error.instance
    props = schema.get("properties", {})
    patterns = schema.get("patternProperties", {})
    return [k for k in instance if k not in props and not any(re.search(p, k) for p in patterns)]


def leaves(error):
    """The errors inside an `anyOf` / `oneOf` (an optional key is `anyOf: [its schema, null]`),
    leaving out the alternative that only says the value is not null."""
    if error.validator in ("anyOf", "oneOf") and error.context:
        inner = [c for c in error.context if not (c.validator == "type" and c.validator_value == "null")]
        if inner:
            return [leaf for c in inner for leaf in leaves(c)]
    return [error]


def places(error, root):
    """(line, column, message) for each place an error points at, 1-based."""
    path = list(error.absolute_path)
    node = node_at(root, path) if root is not None else None
    if error.validator == "additionalProperties" and error.schema.get("additionalProperties") is False:
        out = []
        for key in unexpected_keys(error):
            k = key_node(node, key)
            if k is not None:
                out.append((k.start_mark.line + 1, k.start_mark.column + 1, f"unknown key `{key}`"))
        if out:
            return out
    if node is None:
        return [(None, None, error.message)]
    return [(node.start_mark.line + 1, node.start_mark.column + 1, error.message)]


def main(argv):
    if len(argv) < 3:
        print(__doc__)
        return 2
    with open(argv[1], encoding="utf-8") as f:
        schema = json.load(f)
    jsonschema.Draft202012Validator.check_schema(schema)
    validator = jsonschema.Draft202012Validator(schema)
    bad = False
    for name in argv[2:]:
        with open(name, encoding="utf-8") as f:
            text = f.read()
        if name.endswith(".json"):
            instance, root = json.loads(text), None
        else:
            instance, root = yaml.safe_load(text), yaml.compose(text)
        errors = sorted(validator.iter_errors(instance), key=lambda e: list(map(str, e.absolute_path)))
        if not errors:
            print(f"{name}: ok")
            continue
        bad = True
        shown = set()
        for e in (leaf for error in errors for leaf in leaves(error)):
            for line, column, message in places(e, root):
                where = f"{line}:{column}" if line is not None else e.json_path
                if (where, message) not in shown:
                    shown.add((where, message))
                    print(f"{name}:{where}: {message}")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
