using Microsoft.Extensions.FileProviders;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// The page at / (Service/Web, embedded in the assembly with the charting library). Served before authentication:
/// the page itself holds no data and asks for an API key, which it sends as the Bearer header on every API call.
/// Only the embedded files are public; every /v1 route still needs the key.
/// </summary>
internal static class WebPage
{
    /// <summary>Scripts only from this origin, no inline script, no framing: the tab holds an API key in sessionStorage.</summary>
    public const string ContentSecurityPolicy =
        "default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; img-src 'self' data: blob:; connect-src 'self'; frame-ancestors 'none'; base-uri 'none'; form-action 'self'";

    public static WebApplication UseBitbudgetPage(this WebApplication app)
    {
        var files = new EmbeddedFileProvider(typeof(WebPage).Assembly, "bitbudget.web");
        app.UseFileServer(new FileServerOptions
        {
            FileProvider = files,
            EnableDefaultFiles = true,
            StaticFileOptions =
            {
                OnPrepareResponse = context =>
                {
                    var headers = context.Context.Response.Headers;
                    headers.ContentSecurityPolicy = ContentSecurityPolicy;
                    headers.XContentTypeOptions = "nosniff";
                    headers["Referrer-Policy"] = "no-referrer";
                    // Embedded files change with the binary; make the browser ask each time (a 304 is cheap).
                    headers.CacheControl = "no-cache";
                },
            },
        });
        return app;
    }
}
