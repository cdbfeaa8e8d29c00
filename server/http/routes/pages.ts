/** The built-in thank-you page a browser is sent to (303) after a form post when the experiment has no thankYouUrl. */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import { HTML_CSP, THANK_YOU_PATH, thankYouPage } from '../../views/html.js';

export async function pageRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const html = thankYouPage();
  app.get(
    THANK_YOU_PATH,
    {
      config: { access: { public: true } },
      schema: {
        tags: ['pages'],
        summary: 'Built-in thank-you page (HTML) for respondents',
        response: { 200: { description: 'HTML page', content: { 'text/html': { schema: z.string() } } } },
      },
    },
    async (_request, reply) => {
      reply.header('content-security-policy', HTML_CSP).type('text/html; charset=utf-8');
      return html;
    },
  );
}
