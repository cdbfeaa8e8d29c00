import { describe, expect, it } from 'vitest';
import { createEventStreamParser, dataVersionOf, readEventStream, type StreamEvent } from '../../server/pages/sse.js';

// Expected events follow the WHATWG HTML "event stream interpretation" rules (§9.2.6), read by hand.

function parseAll(chunks: readonly string[]): StreamEvent[] {
  const events: StreamEvent[] = [];
  const parser = createEventStreamParser((e) => events.push(e));
  for (const c of chunks) parser.push(c);
  parser.end();
  return events;
}

describe('event-stream parser', () => {
  it('dispatches data events on blank lines and skips comments', () => {
    const events = parseAll([': keep-alive\n\ndata: {"dataVersion": 3}\n\nevent: version\ndata: {"dataVersion":4}\nid: 9\n\n']);
    expect(events).toEqual([
      { event: 'message', data: '{"dataVersion": 3}', id: null },
      { event: 'version', data: '{"dataVersion":4}', id: '9' },
    ]);
  });

  it('gives the same events however the text is split, with LF, CRLF or CR line ends', () => {
    const text = 'data: one\r\ndata: two\r\n\r\ndata:three\r\rdata: four\n\n';
    const expected = [
      { event: 'message', data: 'one\ntwo', id: null },
      { event: 'message', data: 'three', id: null },
      { event: 'message', data: 'four', id: null },
    ];
    expect(parseAll([text])).toEqual(expected);
    for (let cut = 1; cut < text.length; cut++) expect(parseAll([text.slice(0, cut), text.slice(cut)]), `cut at ${cut}`).toEqual(expected);
    expect(parseAll(text.split(''))).toEqual(expected);
  });

  it('drops an unfinished event at the end of the stream and events without data', () => {
    expect(parseAll(['event: x\n\n', 'data: late'])).toEqual([]);
  });

  it('remembers the retry hint', () => {
    const parser = createEventStreamParser(() => undefined);
    parser.push('retry: 2500\n\nretry: soon\n\n');
    expect(parser.retry).toBe(2500);
  });
});

describe('readEventStream', () => {
  it('reads a fetch Response body split across UTF-8 byte boundaries', async () => {
    const bytes = new TextEncoder().encode('data: {"dataVersion": 1, "note": "é"}\n\nretry: 1500\ndata: {"dataVersion": 2}\n\n');
    const body = new ReadableStream<Uint8Array>({
      start(controller) {
        for (let i = 0; i < bytes.length; i += 7) controller.enqueue(bytes.slice(i, i + 7));
        controller.close();
      },
    });
    const seen: Array<number | null> = [];
    const retry = await readEventStream(new Response(body), (e) => seen.push(dataVersionOf(e)));
    expect(seen).toEqual([1, 2]);
    expect(retry).toBe(1500);
  });

  it('dataVersionOf ignores data that is not a version', () => {
    expect(dataVersionOf({ data: 'not json' })).toBeNull();
    expect(dataVersionOf({ data: '{"dataVersion":"7"}' })).toBeNull();
    expect(dataVersionOf({ data: '{"dataVersion":7}' })).toBe(7);
  });
});
