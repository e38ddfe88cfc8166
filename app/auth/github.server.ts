import { OAuth2Client, type OAuth2Tokens } from "arctic";
import { Authenticator } from "remix-auth";
import { GitHubStrategy } from "remix-auth-github";
import { z } from "zod";

/** Where sign-in goes: GitHub itself, or the local fake started outside production. */
export interface GitHubConfig {
  clientId: string;
  clientSecret: string;
  /** Base of the OAuth web flow (https://github.com). */
  oauthUrl: string;
  /** Base of the REST API (https://api.github.com). */
  apiUrl: string;
  /** True when this is the local fake (development, demo and tests). */
  fake: boolean;
}

/** What Weir takes from a GitHub account. */
export interface GitHubIdentity {
  githubId: number;
  login: string;
  name: string | null;
  /** The primary, verified e-mail: invites and grants are addressed to it. */
  email: string;
  avatarUrl: string | null;
}

/**
 * remix-auth-github builds its OAuth client with GitHub's endpoints fixed as constants
 * (its `client` is arctic's GitHub provider), so the fake used in development and tests
 * could not be reached. This subclass swaps in arctic's generic OAuth 2.0 client with the
 * same calls pointed at the configured base URL; with the default configuration it talks
 * to github.com exactly as the original does.
 */
class ConfigurableGitHubStrategy<User> extends GitHubStrategy<User> {
  constructor(options: GitHubStrategy.ConstructorOptions, verify: (options: GitHubStrategy.VerifyOptions) => Promise<User>, oauthUrl: string) {
    super(options, verify);
    const oauth = new OAuth2Client(options.clientId, options.clientSecret, options.redirectURI.toString());
    const authorize = new URL("/login/oauth/authorize", oauthUrl).toString();
    const token = new URL("/login/oauth/access_token", oauthUrl).toString();
    this.client = Object.assign(Object.create(Object.getPrototypeOf(this.client)), this.client, {
      createAuthorizationURL: (state: string, scopes: string[]) => oauth.createAuthorizationURL(authorize, state, scopes),
      validateAuthorizationCode: (code: string) => oauth.validateAuthorizationCode(token, code, null),
      refreshAccessToken: (refreshToken: string) => oauth.refreshAccessToken(token, refreshToken, []),
    });
  }
}

const userSchema = z.object({ id: z.number().int(), login: z.string(), name: z.string().nullable().optional(), avatar_url: z.string().nullable().optional() });
const emailsSchema = z.array(z.object({ email: z.string(), primary: z.boolean(), verified: z.boolean() }));

/** Reads the signed-in account from GitHub's REST API (GET /user and /user/emails). */
export async function fetchIdentity(config: GitHubConfig, tokens: OAuth2Tokens): Promise<GitHubIdentity> {
  const headers = { authorization: `Bearer ${tokens.accessToken()}`, accept: "application/vnd.github+json", "user-agent": "weir" };
  const [userRes, emailsRes] = await Promise.all([
    fetch(new URL("/user", config.apiUrl), { headers }),
    fetch(new URL("/user/emails", config.apiUrl), { headers }),
  ]);
  if (!userRes.ok || !emailsRes.ok) throw new Error(`GitHub answered ${userRes.status}/${emailsRes.status} when reading the account`);
  const user = userSchema.parse(await userRes.json());
  const primary = emailsSchema.parse(await emailsRes.json()).find((e) => e.primary && e.verified);
  if (!primary) throw new SignInError("Your GitHub account has no verified primary e-mail address; Weir matches people by it.");
  return { githubId: user.id, login: user.login, name: user.name ?? null, email: primary.email.toLowerCase(), avatarUrl: user.avatar_url ?? null };
}

/** A sign-in problem to show the person, not a crash. */
export class SignInError extends Error {
  override name = "SignInError";
}

/** An authenticator for one request; the callback URL follows the public URL or the request's origin. */
export function githubAuthenticator(config: GitHubConfig, callbackUrl: string): Authenticator<GitHubIdentity> {
  const authenticator = new Authenticator<GitHubIdentity>();
  authenticator.use(
    new ConfigurableGitHubStrategy(
      { clientId: config.clientId, clientSecret: config.clientSecret, redirectURI: callbackUrl, scopes: ["read:user", "user:email"] },
      ({ tokens }) => fetchIdentity(config, tokens),
      config.oauthUrl,
    ),
    "github",
  );
  return authenticator;
}
