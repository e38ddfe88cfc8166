import type { Role } from "~/db/schema.server";

/** What each role may do, in the words the console and the invitation e-mail use. */
export const ROLE_ABILITIES: Record<Role, string> = {
  viewer: "reads Intake and Slice (estimates and their intervals)",
  engineer: "slices traffic, merges collectors' samples, and uploads and exports sample files",
  admin: "does everything, including Keys, People, Ledger and Settings",
};

/**
 * The roles from least to most, for choices in forms. Taken from the record above (which the
 * type forces to name every role) because the schema's own list lives in a server-only module.
 */
export const ROLE_CHOICES = Object.keys(ROLE_ABILITIES) as Role[];

/** How the console and the ledger name a person: their login once they signed in, else the e-mail. */
export function memberLabel(user: { login: string | null; email: string }): string {
  return user.login ?? user.email;
}

/** "an engineer", "a viewer"; "An engineer" at the start of a sentence. */
export function withArticle(role: Role, sentenceStart = false): string {
  const article = role === "viewer" ? "a" : "an";
  return `${sentenceStart ? article.toUpperCase().slice(0, 1) + article.slice(1) : article} ${role}`;
}
