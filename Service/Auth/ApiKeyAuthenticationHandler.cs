using System.Security.Claims;
using System.Text.Encodings.Web;
using Bitbudget.Service.Problems;
using Microsoft.AspNetCore.Authentication;
using Microsoft.AspNetCore.Mvc;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Auth;

/// <summary>Authenticates "Authorization: Bearer &lt;key&gt;" against <see cref="ApiKeyRing"/>; a refusal is a 401 problem.</summary>
internal sealed class ApiKeyAuthenticationHandler(
    IOptionsMonitor<AuthenticationSchemeOptions> options,
    ILoggerFactory loggerFactory,
    UrlEncoder encoder,
    ApiKeyRing keys,
    IProblemDetailsService problems)
    : AuthenticationHandler<AuthenticationSchemeOptions>(options, loggerFactory, encoder)
{
    public const string SchemeName = "ApiKey";
    private const string Prefix = "Bearer ";

    protected override Task<AuthenticateResult> HandleAuthenticateAsync()
    {
        string? header = Request.Headers.Authorization;
        if (string.IsNullOrEmpty(header))
        {
            return Task.FromResult(AuthenticateResult.NoResult());
        }

        if (!header.StartsWith(Prefix, StringComparison.OrdinalIgnoreCase) || !keys.Accepts(header[Prefix.Length..].Trim()))
        {
            return Task.FromResult(AuthenticateResult.Fail("The API key is not valid."));
        }

        var identity = new ClaimsIdentity([new Claim(ClaimTypes.Name, "api-key")], SchemeName);
        return Task.FromResult(AuthenticateResult.Success(new AuthenticationTicket(new ClaimsPrincipal(identity), SchemeName)));
    }

    protected override async Task HandleChallengeAsync(AuthenticationProperties properties)
    {
        Response.StatusCode = StatusCodes.Status401Unauthorized;
        Response.Headers.WWWAuthenticate = "Bearer";
        var detail = string.IsNullOrEmpty(Request.Headers.Authorization)
            ? "Send an API key as 'Authorization: Bearer <key>'; without configured keys the service writes one to <data>/api-key at first start."
            : "The API key is not valid; check for a typo or ask for a current key.";
        await problems.WriteAsync(new ProblemDetailsContext
        {
            HttpContext = Context,
            ProblemDetails = new ProblemDetails
            {
                Status = StatusCodes.Status401Unauthorized,
                Type = ProblemTypes.Uri(ProblemTypes.Unauthorized),
                Title = ProblemTypes.Title(ProblemTypes.Unauthorized),
                Detail = detail,
            },
        }).ConfigureAwait(false);
    }
}
