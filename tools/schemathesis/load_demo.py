"""Loads the committed demo scenario (demo-data/) into a running dispar server
through its own API: PUT every site and line, then POST counts.csv as CSV batches.

Usage: python load_demo.py BASE_URL ADMIN_TOKEN DEMO_DATA_DIR

Standard library only, so it runs in any Python 3.9+ (the schemathesis venv too).
Exits non-zero, printing the server's answer, on the first refused request.
"""

import csv
import json
import sys
import urllib.error
import urllib.request

BATCH_ROWS = 1000


def send(base, token, method, path, body, content_type):
    request = urllib.request.Request(
        base + path,
        data=body,
        method=method,
        headers={"Authorization": "Bearer " + token, "Content-Type": content_type},
    )
    try:
        with urllib.request.urlopen(request, timeout=120) as response:
            return response.status, response.read()
    except urllib.error.HTTPError as e:
        sys.exit(f"{method} {path} -> {e.code}: {e.read().decode('utf-8', 'replace')}")


def put_json(base, token, path, value):
    return send(base, token, "PUT", path, json.dumps(value).encode(), "application/json")


def main():
    base, token, data = sys.argv[1].rstrip("/"), sys.argv[2], sys.argv[3]
    with open(f"{data}/sites.csv", newline="", encoding="utf-8") as f:
        sites = list(csv.DictReader(f))
    for s in sites:
        body = {"name": s["name"]}
        if s.get("time_zone"):
            body["time_zone"] = s["time_zone"]
        put_json(base, token, f"/v1/sites/{s['site']}", body)
    with open(f"{data}/lines.csv", newline="", encoding="utf-8") as f:
        lines = list(csv.DictReader(f))
    for l in lines:
        put_json(base, token, f"/v1/sites/{l['site']}/lines/{l['line']}", {"name": l["name"]})
    with open(f"{data}/counts.csv", encoding="utf-8") as f:
        header, *rows = f.read().splitlines()
    written = 0
    for start in range(0, len(rows), BATCH_ROWS):
        chunk = rows[start : start + BATCH_ROWS]
        text = "\n".join([header, *chunk]) + "\n"
        send(base, token, "POST", "/v1/counts", text.encode(), "text/csv")
        written += len(chunk)
    print(f"loaded {len(sites)} sites, {len(lines)} lines, {written} count records", file=sys.stderr)


if __name__ == "__main__":
    main()
