// A small reader for text/event-stream (Server-Sent Events) over fetch().
//
// Why not EventSource: it cannot send an Authorization header, and the read key must never go into a URL.
// So the page calls fetch() with "Authorization: Bearer …" and parses the stream itself, following the
// WHATWG HTML "event stream interpretation" rules: lines end in CRLF, LF or CR; a line starting with ":" is
// a comment (keep-alive); "field: value" with one optional space after the colon; "data" lines are joined
// with "\n"; a blank line dispatches the event (none when no data line was seen); an unfinished event at the
// end of the stream is dropped. Plain ES module, no dependencies; types in sse.d.ts.

/**
 * Incremental parser: push() text chunks as they arrive (they may split lines anywhere, even between CR and
 * LF); onEvent receives { event, data, id } for every complete event ("message" when no event field).
 */
export function createEventStreamParser(onEvent) {
  let buffer = '';
  let data = [];
  let sawData = false;
  let eventName = '';
  let lastId = null;
  let retry = null;

  function dispatch() {
    if (sawData) onEvent({ event: eventName || 'message', data: data.join('\n'), id: lastId });
    data = [];
    sawData = false;
    eventName = '';
  }

  function processLine(line) {
    if (line === '') {
      dispatch();
      return;
    }
    if (line.startsWith(':')) return;
    const colon = line.indexOf(':');
    const field = colon === -1 ? line : line.slice(0, colon);
    let value = colon === -1 ? '' : line.slice(colon + 1);
    if (value.startsWith(' ')) value = value.slice(1);
    if (field === 'data') {
      data.push(value);
      sawData = true;
    } else if (field === 'event') eventName = value;
    else if (field === 'id') {
      if (!value.includes('\u0000')) lastId = value;
    } else if (field === 'retry') {
      if (/^\d+$/.test(value)) retry = Number(value);
    }
  }

  return {
    push(chunk) {
      buffer += chunk;
      let start = 0;
      for (let i = 0; i < buffer.length; i++) {
        const ch = buffer[i];
        if (ch === '\n' || ch === '\r') {
          if (ch === '\r' && i === buffer.length - 1) break; // maybe CRLF split across chunks: wait
          processLine(buffer.slice(start, i));
          if (ch === '\r' && buffer[i + 1] === '\n') i++;
          start = i + 1;
        }
      }
      buffer = buffer.slice(start);
    },
    /** End of stream: a trailing lone CR ends its line; an event without its blank line is dropped. */
    end() {
      if (buffer.endsWith('\r')) processLine(buffer.slice(0, -1));
      buffer = '';
      data = [];
      sawData = false;
      eventName = '';
    },
    /** The last "retry" value in milliseconds the server sent, or null. */
    get retry() {
      return retry;
    },
  };
}

/**
 * Read a fetch() Response body as an event stream until it ends (or the signal aborts: the read then
 * rejects with an AbortError). Resolves with the server's last "retry" hint (ms) or null.
 */
export async function readEventStream(response, onEvent) {
  if (!response.body) throw new TypeError('the response has no body to read');
  const parser = createEventStreamParser(onEvent);
  const reader = response.body.getReader();
  const decoder = new TextDecoder('utf-8');
  for (;;) {
    const { done, value } = await reader.read();
    if (done) break;
    parser.push(decoder.decode(value, { stream: true }));
  }
  parser.push(decoder.decode());
  parser.end();
  return parser.retry;
}

/** The dataVersion carried by an event's JSON data ({"dataVersion": N}), or null. */
export function dataVersionOf(event) {
  try {
    const parsed = JSON.parse(event.data);
    const v = parsed && typeof parsed === 'object' ? parsed.dataVersion : undefined;
    return typeof v === 'number' && Number.isFinite(v) ? v : null;
  } catch {
    return null;
  }
}
