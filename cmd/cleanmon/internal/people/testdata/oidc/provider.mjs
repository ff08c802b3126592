// A real OpenID Connect provider on loopback for the sign-in tests.
// It serves one client with a known secret and a few people with known
// passwords; its sign-in "page" is a plain form post the Go test
// completes without a browser. Consent is implied for this client.
//
// Environment: REDIRECT_URI (the daemon's callback, required),
// CLIENT_SECRET (default "test-secret"). Prints "issuer <url>" on stdout
// once it listens on 127.0.0.1 at a free port.
import http from 'node:http';
import Provider from 'oidc-provider';

const people = {
  lena: { password: 'north-airlock-cascade-7', name: 'Lena Sorensen', roles: ['staff', 'cleanroom-qa'] },
  piotr: { password: 'seven-particles-per-litre', name: 'Piotr Lind', roles: ['cleanroom-operators', 'staff'] },
  guest: { password: 'visitor-badge-number-9', name: 'Gast Besucher', roles: ['visitors'] },
};

const redirectURI = process.env.REDIRECT_URI;
if (!redirectURI) {
  console.error('REDIRECT_URI is required');
  process.exit(2);
}

const server = http.createServer();
server.listen(0, '127.0.0.1', () => {
  const issuer = `http://127.0.0.1:${server.address().port}`;
  const provider = new Provider(issuer, {
    clients: [{
      client_id: 'cleanmon',
      client_secret: process.env.CLIENT_SECRET || 'test-secret',
      redirect_uris: [redirectURI],
      grant_types: ['authorization_code'],
      response_types: ['code'],
    }],
    cookies: { keys: ['loopback-test-cookie-key'] },
    claims: {
      openid: ['sub'],
      profile: ['name', 'preferred_username'],
      roles: ['cleanmon_roles'],
    },
    // Put the scopes' claims into the ID token, which is what the daemon reads.
    conformIdTokenClaims: false,
    features: { devInteractions: { enabled: false } },
    interactions: { url: (ctx, interaction) => `/interaction/${interaction.uid}` },
    async findAccount(ctx, sub) {
      const p = people[sub];
      if (!p) return undefined;
      return {
        accountId: sub,
        async claims() {
          return { sub, name: p.name, preferred_username: sub, cleanmon_roles: p.roles };
        },
      };
    },
    async loadExistingGrant(ctx) {
      const { client, session } = ctx.oidc;
      const existing = session.grantIdFor(client.clientId);
      if (existing) return ctx.oidc.provider.Grant.find(existing);
      const grant = new ctx.oidc.provider.Grant({ clientId: client.clientId, accountId: session.accountId });
      grant.addOIDCScope('openid profile roles');
      grant.addOIDCClaims(['name', 'preferred_username', 'cleanmon_roles']);
      await grant.save();
      return grant;
    },
  });
  provider.proxy = false;
  const callback = provider.callback();

  server.on('request', async (req, res) => {
    const m = req.url.match(/^\/interaction\/([^/?]+)(\/login)?/);
    if (!m) return callback(req, res);
    try {
      const details = await provider.interactionDetails(req, res);
      if (!m[2]) {
        res.writeHead(200, { 'content-type': 'text/plain' });
        res.end(`interaction ${details.uid} prompt ${details.prompt.name}`);
        return;
      }
      let body = '';
      for await (const chunk of req) body += chunk;
      const form = new URLSearchParams(body);
      const who = people[form.get('login')];
      if (!who || who.password !== form.get('password')) {
        res.writeHead(401, { 'content-type': 'text/plain' });
        res.end('wrong login or password');
        return;
      }
      await provider.interactionFinished(req, res, { login: { accountId: form.get('login') } }, { mergeWithLastSubmission: false });
    } catch (err) {
      res.writeHead(500, { 'content-type': 'text/plain' });
      res.end(String(err));
    }
  });
  console.log(`issuer ${issuer}`);
});
