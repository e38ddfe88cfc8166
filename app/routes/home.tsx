import type { Route } from "./+types/home";

export function meta(_: Route.MetaArgs) {
  return [
    { title: "Weir — priority samples of network flow records" },
    {
      name: "description",
      content:
        "Weir keeps a bounded priority sample of flow records per tenant, collector and time window, and answers questions asked later with an unbiased estimate and a 95% interval.",
    },
  ];
}

export { ErrorBoundary } from "~/components/ErrorPanel";

const STEPS = [
  {
    title: "Flow records in",
    body: "Routers and collectors send one record per conversation: addresses, ports, protocol, bytes, packets, start and end time. Often millions of them a minute.",
  },
  {
    title: "A bounded sample kept",
    body: "For every tenant, collector and time window Weir keeps the k records of highest priority w/u — weight over a uniform draw — and the threshold τ they had to beat. Storage stays fixed however fast records arrive.",
  },
  {
    title: "Any question, later",
    body: "A subnet, a port, a protocol, an hour nobody planned for: the sum over the matching records is estimated from the sample, unbiased, with a 95% interval from its estimated variance.",
  },
  {
    title: "Samples merge",
    body: "Samples from several collectors, sites or windows combine into one valid sample, so ingest spreads over nodes and old windows compact without losing unbiasedness.",
  },
] as const;

export default function Home() {
  return (
    <div className="mx-auto max-w-5xl px-6">
      <header className="flex items-center justify-between border-b border-river-800 py-5">
        <div className="flex items-center gap-3">
          <WeirMark className="h-7 w-11" />
          <span className="text-xl font-semibold tracking-tight text-river-50">Weir</span>
        </div>
        <a href="/console" className="rounded-md bg-sand-300 px-3.5 py-2 text-sm font-medium text-river-950 hover:bg-sand-200">
          Open the console
        </a>
      </header>

      <main>
        <section className="grid items-center gap-12 py-16 sm:py-20 lg:grid-cols-[3fr_2fr]">
          <div>
            <h1 className="text-4xl font-semibold leading-tight tracking-tight text-river-50 sm:text-5xl">
              Gauge network traffic without keeping all of it.
            </h1>
            <p className="mt-6 max-w-2xl text-lg leading-relaxed text-river-200">
              Weir takes in network flow records and keeps, for each tenant, collector and time
              window, a priority sample of bounded size. Questions about traffic that nobody
              thought to ask in advance are answered from that sample after the fact, each with
              an unbiased estimate and a 95% interval.
            </p>
          </div>
          <figure className="rounded-lg border border-river-800 bg-river-900 p-6">
            <WeirMark className="mx-auto w-full max-w-xs" />
            <figcaption className="mt-6 space-y-2 text-sm text-river-300">
              <p>Over the kept records that match a question:</p>
              <p className="font-mono text-river-100">
                <span className="text-river-300">estimate </span>
                <span className="text-sand-300">Σ max(w, τ)</span>
              </p>
              <p className="font-mono text-river-100">
                <span className="text-river-300">95% </span>
                <span className="text-sand-300">± 1.96·√(Σ τ·max(0, τ − w))</span>
              </p>
            </figcaption>
          </figure>
        </section>

        <section aria-labelledby="how" className="border-t border-river-800 py-14">
          <h2 id="how" className="text-sm font-semibold uppercase tracking-widest text-sand-300">
            How it works
          </h2>
          <ol className="mt-8 grid gap-x-10 gap-y-10 sm:grid-cols-2">
            {STEPS.map((step, i) => (
              <li key={step.title} className="flex gap-4">
                <span className="font-mono text-sm leading-7 text-sand-400" aria-hidden="true">
                  {String(i + 1).padStart(2, "0")}
                </span>
                <div>
                  <h3 className="text-lg font-medium text-river-50">{step.title}</h3>
                  <p className="mt-2 leading-relaxed text-river-200">{step.body}</p>
                </div>
              </li>
            ))}
          </ol>
        </section>

        <section aria-labelledby="cautions" className="border-t border-river-800 py-14">
          <h2 id="cautions" className="text-sm font-semibold uppercase tracking-widest text-sand-300">
            Two cautions
          </h2>
          <div className="mt-8 grid gap-6 sm:grid-cols-2">
            <article className="rounded-lg border border-river-800 border-l-4 border-l-sand-400 bg-river-900 p-6">
              <h3 className="text-lg font-medium text-river-50">Estimates are statistical</h3>
              <p className="mt-2 leading-relaxed text-river-200">
                Every estimate Weir reports comes with its 95% interval, and small subsets get
                wide ones; the totals it counts exactly (records, bytes and packets per window)
                are labelled exact. For billing or legal disputes, rely on exact accounting,
                not on a sample.
              </p>
            </article>
            <article className="rounded-lg border border-river-800 border-l-4 border-l-sand-400 bg-river-900 p-6">
              <h3 className="text-lg font-medium text-river-50">Flow records can be personal data</h3>
              <p className="mt-2 leading-relaxed text-river-200">
                IP addresses can identify people. Keep samples only as long as you need them,
                set retention to match, and follow your data-protection policy and the law
                where you operate.
              </p>
            </article>
          </div>
        </section>

        <section aria-labelledby="status" className="border-t border-river-800 py-14">
          <h2 id="status" className="text-sm font-semibold uppercase tracking-widest text-sand-300">
            Where to start
          </h2>
          <p className="mt-6 max-w-2xl leading-relaxed text-river-200">
            Collectors and scripts post flows to <code className="font-mono text-sand-200">POST /api/v1/flows</code> and ask
            questions at <code className="font-mono text-sand-200">/api/v1/estimate</code> with an API key; people sign in to
            the console with GitHub to slice traffic, watch intake and manage keys and members. Operators can check this node at{" "}
            <a
              href="/healthz"
              className="font-mono text-sand-300 underline underline-offset-4 hover:text-sand-200"
            >
              /healthz
            </a>
            .
          </p>
        </section>
      </main>

      <footer className="border-t border-river-800 py-8 text-sm text-river-300">
        Method: N. Duffield, C. Lund, M. Thorup, “Priority sampling for estimation of
        arbitrary subset sums”, <i>Journal of the ACM</i> 54(6), 2007.
      </footer>
    </div>
  );
}

/** Weir's mark: water held back by a low wall, spilling over its crest into a lower pool. */
function WeirMark({ className }: { className?: string }) {
  return (
    <svg viewBox="0 0 64 40" className={className} aria-hidden="true">
      <path d="M2 9 Q8 7 14 9 T26 9 H30 V32 H2 Z" className="fill-river-500" />
      <path d="M24 13 H31 L42 32 H24 Z" className="fill-sand-400" />
      <path
        d="M19 9.5 C26 9 30 9.5 33 13.5 S38 22.5 45 24.5"
        fill="none"
        strokeWidth="3.5"
        strokeLinecap="round"
        className="stroke-river-300"
      />
      <path d="M41 25 Q47 23 53 25 T62 25 V32 H41 Z" className="fill-river-600" />
      <path d="M1.5 34 H62.5" strokeWidth="3" strokeLinecap="round" className="stroke-sand-700" />
    </svg>
  );
}
