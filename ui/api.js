// The one way the screens talk to fieldcage: Tauri's invoke inside the tablet
// app, the local HTTP API in a browser. Both reach the same operation set.

const tauri = globalThis.__TAURI__?.core;

function lanToken() {
  const fromHash = /token=([0-9a-f]+)/.exec(location.hash);
  if (fromHash) {
    sessionStorage.setItem('fieldcage-token', fromHash[1]);
    history.replaceState(null, '', location.pathname + '#/route');
  }
  return sessionStorage.getItem('fieldcage-token');
}

/** A refusal from fieldcage: code, message and the field at fault. */
export class Problem extends Error {
  constructor(problem, status) {
    super(problem.message);
    this.code = problem.code;
    this.field = problem.field;
    this.value = problem.value;
    this.status = status;
  }
}

/** Run one operation; resolves only once the change is committed. */
export async function call(op, args = {}) {
  if (tauri) {
    try {
      return await tauri.invoke('call', { op, args });
    } catch (e) {
      throw new Problem(typeof e === 'object' ? e : { code: 'internal', message: String(e) }, 0);
    }
  }
  const headers = { 'Content-Type': 'application/json' };
  const token = lanToken();
  if (token) headers.Authorization = `Bearer ${token}`;
  let response;
  try {
    response = await fetch(`/api/${op}`, { method: 'POST', headers, body: JSON.stringify(args) });
  } catch (e) {
    throw new Problem({ code: 'offline', message: 'fieldcage is not reachable on this device' }, 0);
  }
  const body = await response.json().catch(() => ({}));
  if (!response.ok) throw new Problem(body.error ?? { code: 'internal', message: response.statusText }, response.status);
  return body;
}
