// The page's only way to the service: its HTTP API, with the token the user pasted.

const TOKEN_KEY = 'trueshift.token';

export function getToken() {
  return sessionStorage.getItem(TOKEN_KEY);
}

export function setToken(token) {
  if (token === null || token === '') sessionStorage.removeItem(TOKEN_KEY);
  else sessionStorage.setItem(TOKEN_KEY, token);
}

export class ApiError extends Error {
  constructor(status, code, message) {
    super(message);
    this.status = status;
    this.code = code;
  }
}

function authHeaders() {
  const token = getToken();
  return token === null ? {} : { authorization: `Bearer ${token}` };
}

/** JSON in, JSON out; the service's error catalogue becomes an ApiError with its message. */
export async function api(path, { method = 'GET', body, as = 'json' } = {}) {
  const headers = { ...authHeaders() };
  if (body !== undefined) headers['content-type'] = 'application/json';
  const response = await fetch(path, {
    method,
    headers,
    body: body === undefined ? undefined : JSON.stringify(body),
  });
  if (!response.ok) {
    let info = {};
    try {
      info = await response.json();
    } catch {
      // Not every failure (a proxy, a crash) answers in JSON.
    }
    const message = [info.message, info.detail].filter(Boolean).join(' ');
    throw new ApiError(
      response.status,
      info.code ?? `HTTP ${response.status}`,
      message || response.statusText,
    );
  }
  if (as === 'text') return response.text();
  return response.json();
}

/** A tag name as one path segment: names may hold "/". */
export function tagSegment(name) {
  return encodeURIComponent(name);
}

function parseBlock(block) {
  const event = { id: null, event: 'message', data: '', retry: null };
  const data = [];
  for (const line of block.split('\n')) {
    if (line === '' || line.startsWith(':')) continue;
    const colon = line.indexOf(':');
    const field = colon < 0 ? line : line.slice(0, colon);
    const value = colon < 0 ? '' : line.slice(colon + 1).replace(/^ /, '');
    if (field === 'id') event.id = value;
    else if (field === 'event') event.event = value;
    else if (field === 'data') data.push(value);
    else if (field === 'retry' && /^\d+$/.test(value)) event.retry = Number(value);
  }
  event.data = data.join('\n');
  return event;
}

/**
 * Follows the service's event stream. EventSource cannot send an Authorization header and the API
 * takes the token only there, so the stream is read with fetch; resuming with Last-Event-ID works
 * as EventSource's would.
 */
export function followEvents({ onEvent, onState }) {
  let stopped = false;
  let controller = null;
  let lastId = null;
  let retryMs = 3000;
  let wake = null;

  // A pause before reconnecting that restart() can cut short, so a new token takes effect at once.
  const pause = (ms) =>
    new Promise((resolve) => {
      const timer = setTimeout(resolve, ms);
      wake = () => {
        clearTimeout(timer);
        resolve();
      };
    });

  async function once() {
    controller = new AbortController();
    const headers = { accept: 'text/event-stream', ...authHeaders() };
    if (lastId !== null) headers['last-event-id'] = lastId;
    const response = await fetch('/api/v1/events', { headers, signal: controller.signal });
    if (!response.ok || response.body === null) {
      return response.status === 401 || response.status === 403 ? 'needs-token' : 'down';
    }
    onState('live');
    const reader = response.body.pipeThrough(new TextDecoderStream()).getReader();
    let buffer = '';
    for (;;) {
      const { value, done } = await reader.read();
      if (done) return 'reconnecting';
      buffer += value.replace(/\r\n?/g, '\n');
      let end = buffer.indexOf('\n\n');
      while (end >= 0) {
        const event = parseBlock(buffer.slice(0, end));
        buffer = buffer.slice(end + 2);
        if (event.retry !== null) retryMs = event.retry;
        if (event.id !== null) lastId = event.id;
        if (event.data !== '' || event.event !== 'message') {
          let data = {};
          try {
            data = event.data === '' ? {} : JSON.parse(event.data);
          } catch {
            data = { text: event.data };
          }
          onEvent({ kind: event.event, id: event.id, data });
        }
        end = buffer.indexOf('\n\n');
      }
    }
  }

  (async () => {
    while (!stopped) {
      let state = 'reconnecting';
      try {
        state = await once();
      } catch {
        // A dropped connection or an abort: either way, try again below unless stopped.
      }
      if (stopped) return;
      onState(state);
      await pause(retryMs);
      wake = null;
    }
  })();

  return {
    /** Starts over with the current token (after it changed). */
    restart() {
      lastId = null;
      controller?.abort();
      wake?.();
    },
    stop() {
      stopped = true;
      controller?.abort();
    },
  };
}
