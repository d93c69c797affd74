"""Checks that every example in openapi.yaml is valid against its own schema:
request bodies, responses (also through $ref'd response components) and parameters.
schemathesis sends the request examples but never checks the response examples, so
a stale example would otherwise go unnoticed.

Usage: python check_examples.py openapi.yaml   (needs PyYAML and jsonschema, both
installed with schemathesis). Exits 1 listing every invalid example.
"""

import sys

import jsonschema
import yaml


def main():
    doc = yaml.safe_load(open(sys.argv[1], encoding="utf-8"))
    failures = []
    checked = 0

    def resolve(node):
        while isinstance(node, dict) and "$ref" in node:
            target = doc
            for part in node["$ref"].lstrip("#/").split("/"):
                target = target[part]
            node = target
        return node

    def validate(value, schema, where):
        nonlocal checked
        checked += 1
        # The components travel with the schema so that its $refs resolve.
        full = dict(schema, components=doc["components"])
        validator = jsonschema.Draft202012Validator(full, format_checker=jsonschema.FormatChecker())
        for error in validator.iter_errors(value):
            path = "/".join(str(p) for p in error.absolute_path)
            failures.append(f"{where}: at /{path}: {error.message[:200]}")

    def media(content, where):
        for media_type, m in content.items():
            schema = m.get("schema")
            if schema is None:
                continue
            if "example" in m:
                validate(m["example"], schema, f"{where} {media_type}")
            for name, example in m.get("examples", {}).items():
                validate(resolve(example)["value"], schema, f"{where} {media_type} example {name}")

    for path, item in doc["paths"].items():
        for method, op in item.items():
            if method == "parameters":
                continue
            where = f"{method.upper()} {path}"
            if "requestBody" in op:
                media(resolve(op["requestBody"])["content"], f"{where} request body")
            for status, response in op["responses"].items():
                response = resolve(response)
                media(response.get("content", {}), f"{where} {status}")
            for param in item.get("parameters", []) + op.get("parameters", []):
                param = resolve(param)
                if "example" in param:
                    validate(param["example"], param["schema"], f"{where} parameter {param['name']}")
                for name, example in param.get("examples", {}).items():
                    validate(example["value"], param["schema"], f"{where} parameter {param['name']} {name}")

    if failures:
        print("\n".join(failures), file=sys.stderr)
        print(f"{len(failures)} invalid example(s) in {sys.argv[1]}", file=sys.stderr)
        sys.exit(1)
    print(f"{checked} examples in {sys.argv[1]} match their schemas", file=sys.stderr)


if __name__ == "__main__":
    main()
