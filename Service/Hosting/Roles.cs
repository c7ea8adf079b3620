namespace Bitbudget.Service.Hosting;

/// <summary>The values of <c>Bitbudget:Role</c>: what one process of a deployment does.</summary>
internal static class Roles
{
    /// <summary>HTTP API and job workers in one process (the default; one machine).</summary>
    public const string All = "all";

    /// <summary>Serves the HTTP API and queues jobs; runs none.</summary>
    public const string Api = "api";

    /// <summary>Runs jobs; serves only /healthz and /metrics.</summary>
    public const string Worker = "worker";
}
