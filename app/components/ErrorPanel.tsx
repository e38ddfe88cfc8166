import { isRouteErrorResponse, Link, useRouteError } from "react-router";

/**
 * The one way Weir shows a failed page. Thrown responses (404, 403, ...) show their status
 * and message; unexpected errors show details only in development, so production pages
 * never leak stack traces.
 */
export function ErrorPanel({ error }: { error: unknown }) {
  let status = "Error";
  let title = "Something went wrong";
  let detail = "The page could not be shown. Try again, or go back to the start page.";
  let stack: string | undefined;

  if (isRouteErrorResponse(error)) {
    status = String(error.status);
    const message = typeof error.data === "object" && error.data !== null && typeof error.data.message === "string" ? error.data.message : undefined;
    if (message) {
      title = error.status === 404 ? "Not found" : error.status === 403 ? "Not allowed" : error.statusText || title;
      detail = message;
    } else if (error.status === 404) {
      // Fixed text: for an unmatched URL the router's own data is an internal message.
      title = "Not found";
      detail = "Nothing lives at this address.";
    } else {
      title = error.statusText || title;
      if (typeof error.data === "string" && error.data.length > 0) detail = error.data;
    }
  } else if (import.meta.env.DEV && error instanceof Error) {
    detail = error.message;
    stack = error.stack;
  }

  return (
    <main className="mx-auto flex min-h-[60vh] max-w-2xl flex-col justify-center px-6 py-16">
      <title>{`${title} · Weir`}</title>
      <p className="font-mono text-sm tracking-widest text-sand-300">{status}</p>
      <h1 className="mt-2 text-3xl font-semibold text-river-50">{title}</h1>
      <p className="mt-4 text-river-200">{detail}</p>
      {stack ? (
        <pre className="mt-6 overflow-x-auto rounded-md border border-river-700 bg-river-900 p-4 font-mono text-xs text-river-200">
          {stack}
        </pre>
      ) : null}
      <p className="mt-8">
        <Link to="/" className="text-sand-300 underline underline-offset-4 hover:text-sand-200">
          Back to the start page
        </Link>
      </p>
    </main>
  );
}

/** Route modules re-export this as their `ErrorBoundary`. */
export function ErrorBoundary() {
  return <ErrorPanel error={useRouteError()} />;
}
