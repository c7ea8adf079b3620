using Microsoft.AspNetCore.Authentication;

namespace Bitbudget.Service.Auth;

internal static class AuthRegistration
{
    public static IServiceCollection AddBitbudgetAuth(this IServiceCollection services)
    {
        services.AddSingleton<ApiKeyRing>();
        services.AddAuthentication(ApiKeyAuthenticationHandler.SchemeName)
            .AddScheme<AuthenticationSchemeOptions, ApiKeyAuthenticationHandler>(ApiKeyAuthenticationHandler.SchemeName, null);
        services.AddAuthorization();
        return services;
    }
}
