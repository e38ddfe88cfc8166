import { Form, redirect, useLoaderData } from "react-router";
import { requireUser } from "~/auth/guards.server";
import { membershipsOf } from "~/auth/users.server";
import { Button, EmptyState } from "~/components/ui";
import type { Route } from "./+types/console.index";

export const meta: Route.MetaFunction = () => [{ title: "Console · Weir" }];

/** /console: straight to the first tenant's Slice, or say that there is none yet. */
export async function loader({ request, context }: Route.LoaderArgs) {
  const user = await requireUser(request, context);
  const tenants = await membershipsOf(context.db, user.id);
  if (tenants.length > 0) throw redirect(`/t/${tenants[0].slug}/slice`);
  return { email: user.email };
}

export default function ConsoleIndex() {
  const { email } = useLoaderData<typeof loader>();
  return (
    <main className="mx-auto max-w-xl px-6 py-20">
      <EmptyState title="You do not belong to any tenant yet">
        <p>
          Signed in as <span className="font-mono">{email}</span>. Ask a tenant admin to invite this address, or, when you run this Weir yourself,
          grant access with <code className="font-mono">npm run admin -- user grant {email} &lt;tenant&gt; admin</code>.
        </p>
      </EmptyState>
      <Form method="post" action="/signout" className="mt-6 text-center">
        <Button tone="quiet" type="submit">
          Sign out
        </Button>
      </Form>
    </main>
  );
}
