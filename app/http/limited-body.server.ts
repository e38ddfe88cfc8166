/**
 * Request bodies read under a byte limit: refused up front when Content-Length says more,
 * and while streaming otherwise, so an unbounded body is never held in memory. A refused
 * body is still read, up to DISCARD_MAX_BYTES, and thrown away before the answer goes out:
 * a server that answers and closes while the client is still sending resets the client's
 * socket, and the client may lose the answer (a lingering close, common practice for HTTP
 * servers). Past that the connection is simply cut.
 */

export const DISCARD_MAX_BYTES = 64 * 1024 * 1024;

/**
 * The body of `request`, at most `maxBytes`; throws `tooLarge()` beyond. The result owns its
 * whole ArrayBuffer (unlike Buffer.concat, which may return a slice of Node's shared pool),
 * so it can be transferred to a worker.
 */
export async function readLimitedBody(request: Request, maxBytes: number, tooLarge: () => Error): Promise<Uint8Array<ArrayBuffer>> {
  const declared = request.headers.get("content-length");
  if (declared !== null && Number(declared) > maxBytes) {
    await discardBody(request);
    throw tooLarge();
  }
  if (!request.body) return new Uint8Array(0);
  const reader = request.body.getReader();
  const chunks: Uint8Array[] = [];
  let total = 0;
  for (;;) {
    const { done, value } = await reader.read();
    if (done) break;
    total += value.byteLength;
    if (total > maxBytes) {
      await discardRest(reader, total);
      throw tooLarge();
    }
    chunks.push(value);
  }
  const body = new Uint8Array(total);
  let at = 0;
  for (const chunk of chunks) {
    body.set(chunk, at);
    at += chunk.byteLength;
  }
  return body;
}

/** Reads and throws away whatever of the request body nobody read (see DISCARD_MAX_BYTES). */
export async function discardBody(request: Request): Promise<void> {
  if (!request.body || request.bodyUsed || request.body.locked) return;
  await discardRest(request.body.getReader(), 0);
}

async function discardRest(reader: ReadableStreamDefaultReader<Uint8Array>, alreadyRead: number): Promise<void> {
  let total = alreadyRead;
  try {
    while (total <= DISCARD_MAX_BYTES) {
      const { done, value } = await reader.read();
      if (done) return;
      total += value.byteLength;
    }
    await reader.cancel();
  } catch {
    // The client went away: nothing left to answer.
  }
}
