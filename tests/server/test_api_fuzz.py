"""Property-based robustness of the HTTP API, driven by the app's own OpenAPI schema.

Schemathesis turns every operation of ``app.openapi()`` into a Hypothesis strategy of
requests, both schema-conforming (positive) and schema-violating (negative); each
request is sent in-process through the FastAPI TestClient (no socket). The properties:

- no answer is a 5xx;
- every 4xx carries the one error shape, RFC 9457 problem details, with a
  non-empty type, title and detail, naming no internal class or server path;
- on a server started with a token, a write without the token never succeeds and the
  archive (every run file, meta.json, stored configs, catalog) hashes the same after
  all the requests;
- with the token, a refused write (4xx) leaves the archive as it was before that
  request (no half-written run), and a background job started by an accepted write
  never fails with an internal error.

Examples per operation are bounded and Hypothesis is derandomized, so the test is
deterministic in CI and runs in well under a minute on 2 cores.
"""

from __future__ import annotations

import hashlib
import re
import shutil
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
import requests
import schemathesis
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, Phase, given, settings
from schemathesis import GenerationMode

from analysis import catalogue as cat
from analysis.archive.store import Archive
from server.app import create_app
from tests.server.dashboard_fixtures import ingest_and_analyse, wait_job, write_demo_inputs

#: Demo run length: short, the properties are about requests, not about the physics. [s]
FUZZ_RUN_S = 15.0
#: Examples per operation, generation mode and path variant (bounds the runtime).
EXAMPLES = 10
#: Fewer for the comparison routes: each valid request loads both runs and bootstraps.
EXAMPLES_COMPARE = 3
#: Write token of the fuzzed servers.
TOKEN = "fuzz-token"
WRITE_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
FUZZ_SETTINGS = settings(
    derandomize=True,
    database=None,
    deadline=None,
    phases=[Phase.explicit, Phase.generate],  # collect, do not shrink: report every failure
    suppress_health_check=list(HealthCheck),
)


@dataclass
class FuzzArchive:
    """An archive holding one analysed demo run, plus a stored profile and channel map."""

    root: Path
    run_id: str


@pytest.fixture(scope="module")
def fuzz_archive(tmp_path_factory: pytest.TempPathFactory) -> FuzzArchive:
    inputs = write_demo_inputs(tmp_path_factory.mktemp("fuzz-inputs"), duration_s=FUZZ_RUN_S)
    root = tmp_path_factory.mktemp("fuzz-archive")
    archive = Archive(root)
    run_id = ingest_and_analyse(archive, inputs, name="fuzz demo", course="gullhaven-loop")
    archive.save_config("profile", "marram2", inputs.profile_path.read_text(encoding="utf-8"))
    archive.save_config("map", "marram2", inputs.map_path.read_text(encoding="utf-8"))
    return FuzzArchive(root, run_id)


def archive_digest(root: Path) -> dict[str, str]:
    """SHA-256 of every file under the archive root, by relative path."""
    return {
        p.relative_to(root).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(root.rglob("*"))
        if p.is_file()
        and not p.name.endswith(("-journal", "-wal", "-shm"))
        # The Fleet page's cache is derived data a read may write (never the truth).
        and p.name != "trends-cache.parquet"
    }


def digest_change(before: dict[str, str], after: dict[str, str]) -> str:
    """The files added, removed or changed between two digests ('' when none)."""
    changed = sorted(k for k in before.keys() & after.keys() if before[k] != after[k])
    added, removed = sorted(after.keys() - before.keys()), sorted(before.keys() - after.keys())
    parts = [f"{n}: {v}" for n, v in (("changed", changed), ("added", added), ("removed", removed))]
    return "; ".join(p for p, v in zip(parts, (changed, added, removed), strict=True) if v)


def error_shape_problem(response: Any) -> str | None:
    """Why a 4xx body is not RFC 9457 problem details with text in each member, or None."""
    if response.headers.get("content-type") != "application/problem+json":
        return f"media type {response.headers.get('content-type')!r}, not application/problem+json"
    try:
        body = response.json()
    except ValueError:
        return f"not JSON: {response.text[:200]!r}"
    if not isinstance(body, dict):
        return f"not a problem object: {body!r:.200}"
    for key in ("type", "title", "detail"):
        if not isinstance(body.get(key), str) or not body[key].strip():
            return f"{key} missing or empty: {body!r:.200}"
    if body.get("status") != response.status_code:
        return f"status {body.get('status')!r} is not the HTTP status {response.status_code}"
    if re.search(r"(?:^|: |; ): ", body["detail"]):
        return f"a part of the detail names no place (': '): {body['detail']!r:.200}"
    if re.search(r"\b\w+Error\b|/tmp/|/home/|\.py\b", body["title"] + body["detail"]):
        return f"names an internal class or server path: {body!r:.200}"
    return None


@dataclass
class Findings:
    """Every broken property, with a request that shows it (no shrinking, no early stop)."""

    problems: list[str] = field(default_factory=list)
    sent: dict[str, int] = field(default_factory=dict)

    def add(self, label: str, request: requests.PreparedRequest, what: str) -> None:
        body = request.body if isinstance(request.body, bytes | None) else str(request.body)
        self.problems.append(
            f"{label}: {what}\n    {request.method} {request.url}\n    body: {body!r:.300}"
        )


def prepared(case: Any) -> requests.PreparedRequest:
    """The case as one HTTP request (schemathesis serializes query, JSON, multipart, text)."""
    kwargs = case.as_transport_kwargs(base_url="http://testserver")
    kwargs.pop("cookies", None)
    return requests.Request(**kwargs).prepare()


def send(client: TestClient, request: requests.PreparedRequest, token: str | None) -> Any:
    headers = dict(request.headers)
    if token is not None:
        headers["Authorization"] = f"Bearer {token}"
    return client.request(
        str(request.method), str(request.url), headers=headers, content=request.body
    )


def variants(path: str, run_id: str) -> list[dict[str, Any]]:
    """Strategy options per operation: generated everything, plus real ids where they matter.

    A real run id in the path (or in ``a``, ``b``, ``run``) and a real signal get past the
    404 and the 'no such signal' 400, and fuzz the rest of the request against stored data.
    """
    out: list[dict[str, Any]] = [{}]
    if "{run_id}" in path:
        out.append({"path_parameters": {"run_id": run_id}})
    if path.endswith("/series"):
        out.append({"path_parameters": {"run_id": run_id}, "query": {"signals": cat.ROLL}})
    if "{kind}" in path:
        out += [{"path_parameters": {"kind": "profile"}}, {"path_parameters": {"kind": "map"}}]
    if path == "/api/compare/candidates":
        out.append({"query": {"run": run_id}})
    elif path.startswith("/api/compare"):
        out.append({"query": {"a": [run_id], "b": [run_id]}})
    return out


def negatable(definition: dict[str, Any], options: dict[str, Any]) -> bool:
    """Whether a request can break the schema once ``options`` fix some parts.

    A path of plain strings cannot be broken (any text is a valid string), so the
    negative mode has nothing to generate there and would only search in vain.
    """
    if "requestBody" in definition:
        return True
    fixed = set(options.get("path_parameters", {})) | set(options.get("query", {}))
    for param in definition.get("parameters", []):
        if param["name"] in fixed:
            continue
        plain = param.get("schema", {}).get("type") == "string" and "enum" not in param["schema"]
        if param["in"] != "path" or not plain:
            return True
    return False


def _drive(
    strategy: Any,
    n: int,
    label: str,
    findings: Findings,
    check: Callable[[str, requests.PreparedRequest, Any, Findings], None],
) -> None:
    @settings(FUZZ_SETTINGS, max_examples=n)
    @given(case=strategy)
    def one(case: Any) -> None:
        request = prepared(case)
        findings.sent[label] += 1
        check(label, request, case, findings)

    one()


def fuzz_operations(
    app: Any,
    run_id: str,
    methods: frozenset[str] | None,
    check: Callable[[str, requests.PreparedRequest, Any, Findings], None],
) -> Findings:
    """Send generated requests for every operation (of ``methods``, or all) to ``check``."""
    spec = app.openapi()
    schema = schemathesis.openapi.from_dict(spec)
    findings = Findings()
    for result in schema.get_all_operations():
        operation = result.ok()
        method = operation.method.upper()
        if methods is not None and method not in methods:
            continue
        label = f"{method} {operation.path}"
        findings.sent[label] = 0
        n = EXAMPLES_COMPARE if operation.path.startswith("/api/compare") else EXAMPLES
        definition = spec["paths"][operation.path][operation.method.lower()]
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
            for options in variants(operation.path, run_id):
                if mode is GenerationMode.NEGATIVE and not negatable(definition, options):
                    continue
                strategy = operation.as_strategy(generation_mode=mode, **options)
                _drive(strategy, n, label, findings, check)
        # Edge values random generation seldom reaches, one query parameter at a time.
        for options in variants(operation.path, run_id):
            for name, value in edge_values(definition, options):
                query = {**options.get("query", {}), name: value}
                strategy = operation.as_strategy(**{**options, "query": query})
                _drive(strategy, 1, label, findings, check)
    return findings


#: Query values at the edges, by schema type: non-finite and huge numbers, negative
#: integers, empty and NUL strings (common practice, no source).
EDGE_VALUES = {
    "number": ("nan", "inf", "-inf", "1e309", "-1e308"),
    "integer": ("-1", "0", "99999999999999999999"),
    "string": ("", "\x00"),
}


def edge_values(definition: dict[str, Any], options: dict[str, Any]) -> list[tuple[str, str]]:
    """(name, value) pairs of the edge values of each query parameter not fixed by options."""
    fixed = set(options.get("query", {}))
    out = []
    for param in definition.get("parameters", []):
        if param["in"] != "query" or param["name"] in fixed:
            continue
        schema = param.get("schema", {})
        types = {schema.get("type")} | {s.get("type") for s in schema.get("anyOf", [])}
        for kind in sorted(EDGE_VALUES.keys() & types):
            out += [(param["name"], v) for v in EDGE_VALUES[kind]]
    return out


def check_answer(label: str, request: Any, response: Any, findings: Findings) -> bool:
    """No 5xx; a 4xx has the error shape. True when the answer is a refusal (4xx)."""
    if response.status_code >= 500:
        findings.add(label, request, f"answered {response.status_code}: {response.text[:300]}")
        return False
    if response.status_code >= 400:
        problem = error_shape_problem(response)
        if problem:
            findings.add(label, request, f"{response.status_code} with a bad error body: {problem}")
        return True
    return False


def report(findings: Findings) -> str:
    return f"{len(findings.problems)} problem(s):\n" + "\n".join(findings.problems[:30])


@pytest.fixture
def token_client(fuzz_archive: FuzzArchive) -> Iterator[TestClient]:
    with TestClient(create_app(fuzz_archive.root, token=TOKEN), raise_server_exceptions=False) as c:
        yield c


def test_every_operation_answers_4xx_with_the_error_shape_and_changes_nothing(
    fuzz_archive: FuzzArchive, token_client: TestClient
) -> None:
    before = archive_digest(fuzz_archive.root)
    writes_refused = 0

    def check(label: str, request: Any, case: Any, findings: Findings) -> None:
        nonlocal writes_refused
        response = send(token_client, request, token=None)
        check_answer(label, request, response, findings)
        if request.method in WRITE_METHODS:
            if response.status_code < 400:
                findings.add(
                    label, request, f"a write without the token got {response.status_code}"
                )
            writes_refused += response.status_code == 401

    findings = fuzz_operations(token_client.app, fuzz_archive.run_id, None, check)
    assert not findings.problems, report(findings)
    # Every operation of the schema was exercised (a new route is covered automatically).
    schema_ops = {
        f"{m.upper()} {p}" for p, ops in token_client.app.openapi()["paths"].items() for m in ops
    }
    assert set(findings.sent) == schema_ops
    assert all(n > 0 for n in findings.sent.values()), findings.sent
    # The token guard was reached, not only body or routing errors.
    assert writes_refused > 0
    change = digest_change(before, archive_digest(fuzz_archive.root))
    assert not change, f"requests without the token changed the archive: {change}"


def test_refused_writes_with_the_token_leave_the_archive_as_it_was(
    fuzz_archive: FuzzArchive, tmp_path: Path
) -> None:
    root = tmp_path / "archive"
    shutil.copytree(fuzz_archive.root, root)
    accepted = 0
    with TestClient(create_app(root, token=TOKEN), raise_server_exceptions=False) as client:

        def check(label: str, request: Any, case: Any, findings: Findings) -> None:
            nonlocal accepted
            before = archive_digest(root)
            response = send(client, request, token=TOKEN)
            refused = check_answer(label, request, response, findings)
            if response.status_code == 202:
                job = wait_job(client, response.json()["job"]["id"])
                error = job.get("error") or {}
                if error.get("type") == "/api.html#problem-internal":
                    findings.add(label, request, f"its job failed internally: {job}")
            if refused:
                change = digest_change(before, archive_digest(root))
                if change:
                    findings.add(label, request, f"refused ({response.status_code}) yet {change}")
            accepted += response.status_code < 400

        findings = fuzz_operations(client.app, fuzz_archive.run_id, WRITE_METHODS, check)
    assert not findings.problems, report(findings)
    assert set(findings.sent) >= {
        "PATCH /api/runs/{run_id}",
        "DELETE /api/runs/{run_id}",
        "POST /api/runs/{run_id}/analyse",
        "POST /api/upload",
        "PUT /api/configs/{kind}/{name}",
    }
    # Some generated writes were valid and went through, so the 4xx checks had company.
    assert accepted > 0


def test_non_finite_window_is_a_clear_400(
    fuzz_archive: FuzzArchive, token_client: TestClient
) -> None:
    # Found by the fuzz test: t0=nan answered 500 (NaN cannot be written as JSON).
    run = fuzz_archive.run_id
    for query in ("t0=nan", "t1=inf", "t0=-inf&t1=1"):
        response = token_client.get(f"/api/runs/{run}/series?signals=roll&{query}")
        assert response.status_code == 400, response.text
        assert "must be a finite time in seconds" in response.json()["detail"]


def test_negative_bootstrap_seed_is_a_clear_400(
    fuzz_archive: FuzzArchive, token_client: TestClient
) -> None:
    # Found by the fuzz test: seed=-1 answered 500 (numpy refuses negative seeds).
    run = fuzz_archive.run_id
    response = token_client.get(f"/api/compare?a={run}&b={run}&seed=-1&n_boot=100")
    assert response.status_code == 400, response.text
    assert "seed must be a whole number >= 0, found -1" in response.json()["detail"]


def test_validation_errors_name_the_request_body(fuzz_archive: FuzzArchive, tmp_path: Path) -> None:
    # Found by the fuzz test: a missing or broken JSON body gave "Bad request: : Field required."
    # and "Bad request: 0: JSON decode error." (no place named).
    run = fuzz_archive.run_id
    with TestClient(create_app(tmp_path), raise_server_exceptions=False) as client:
        missing = client.post(f"/api/runs/{run}/analyse")
        broken = client.patch(
            f"/api/runs/{run}", content=b"{oops", headers={"content-type": "application/json"}
        )
    assert missing.status_code == 400
    assert "request body: Field required" in missing.json()["detail"]
    assert broken.status_code == 400
    assert "request body: not valid JSON" in broken.json()["detail"]
    assert "at character 1" in broken.json()["detail"]
