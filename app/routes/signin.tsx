import { Form, redirect, useLoaderData } from "react-router";
import { optionalUser } from "~/auth/guards.server";
import { safeReturnTo } from "~/auth/session.server";
import { Button } from "~/components/ui";
import type { Route } from "./+types/signin";

export const meta: Route.MetaFunction = () => [{ title: "Sign in · Weir" }];

export async function loader({ request, context }: Route.LoaderArgs) {
  const url = new URL(request.url);
  const returnTo = safeReturnTo(url.searchParams.get("returnTo"));
  if (await optionalUser(request, context)) throw redirect(returnTo);
  return { returnTo, fake: context.github.fake, error: url.searchParams.get("error") };
}

export default function SignIn() {
  const { returnTo, fake, error } = useLoaderData<typeof loader>();
  return (
    <main className="mx-auto flex min-h-screen max-w-md flex-col justify-center px-6">
      <p className="font-mono text-sm tracking-widest text-sand-300">WEIR</p>
      <h1 className="mt-2 text-3xl font-semibold text-river-50">Sign in to the console</h1>
      <p className="mt-3 text-river-200">Weir signs people in with their GitHub account and matches them to tenants by their verified e-mail address.</p>
      {error ? (
        <p role="alert" className="mt-4 rounded-md border border-red-400/50 bg-red-950/40 px-4 py-3 text-sm text-red-100">
          {error}
        </p>
      ) : null}
      <Form method="post" action="/auth/github" className="mt-8">
        <input type="hidden" name="returnTo" value={returnTo} />
        <Button type="submit" className="w-full justify-center py-3">
          Sign in with GitHub
        </Button>
      </Form>
      {fake ? (
        <p className="mt-4 text-sm text-river-300">
          Development or demo: sign-in goes to a local fake GitHub with invented accounts. It never runs beside a real GitHub OAuth app.
        </p>
      ) : null}
    </main>
  );
}
