// Types for sse.js (a plain browser ES module shared by the results page and the tests).
export interface StreamEvent {
  event: string;
  data: string;
  id: string | null;
}
export interface EventStreamParser {
  push(chunk: string): void;
  end(): void;
  readonly retry: number | null;
}
export declare function createEventStreamParser(onEvent: (event: StreamEvent) => void): EventStreamParser;
export declare function readEventStream(response: Response, onEvent: (event: StreamEvent) => void): Promise<number | null>;
export declare function dataVersionOf(event: { data: string }): number | null;
