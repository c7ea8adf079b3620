using Microsoft.AspNetCore.Authentication;
using Microsoft.AspNetCore.Authorization;

namespace Bitbudget.Service.Auth;

internal static class AuthRegistration
{
    public static IServiceCollection AddBitbudgetAuth(this IServiceCollection services)
    {
        services.AddSingleton<ApiKeyRing>();
        services.AddAuthentication(ApiKeyAuthenticationHandler.SchemeName)
            .AddScheme<AuthenticationSchemeOptions, ApiKeyAuthenticationHandler>(ApiKeyAuthenticationHandler.SchemeName, null);
        // Every endpoint needs a key unless it says AllowAnonymous, including those routing makes up when a
        // request matches a route but not its content type (415) or method (405): without this fallback an
        // anonymous caller learned about the API from a 415 before being asked for a key. A request that
        // matches no route at all stays a 404.
        services.AddAuthorization(options => options.FallbackPolicy = new AuthorizationPolicyBuilder()
            .RequireAssertion(context => context.User.Identity?.IsAuthenticated == true
                || (context.Resource is HttpContext http && http.GetEndpoint() is null))
            .Build());
        return services;
    }
}
