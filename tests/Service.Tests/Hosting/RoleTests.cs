using System.Net;
using Bitbudget.Service.Tests.Support;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Tests.Hosting;

/// <summary>Bitbudget:Role: an API process serves HTTP and runs no jobs; a worker runs jobs and serves only health and metrics.</summary>
public sealed class RoleTests
{
    [Fact]
    public async Task AWorkerServesOnlyHealthAndMetrics()
    {
        using var factory = new ServiceFactory(workers: 1, configureKey: true, new Dictionary<string, string> { ["Bitbudget:Role"] = "Worker" });
        using var client = factory.CreateAuthorizedClient();

        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync("/healthz")).StatusCode);
        Assert.Contains("bitbudget_trials_total", await client.GetStringAsync("/metrics"), StringComparison.Ordinal);
        Assert.Equal(HttpStatusCode.NotFound, (await client.GetAsync("/v1/models")).StatusCode);
        Assert.Equal(HttpStatusCode.NotFound, (await client.PostAsync("/v1/searches", new StringContent("{}"))).StatusCode);
        Assert.Equal(HttpStatusCode.NotFound, (await client.GetAsync("/openapi/v1.json")).StatusCode);
        Assert.Contains(factory.Services.GetServices<IHostedService>(), s => s.GetType().Name.Contains("BackgroundJobServer", StringComparison.Ordinal));
    }

    [Fact]
    public async Task AnApiProcessQueuesSearchesButRunsNoJobs()
    {
        using var factory = new ServiceFactory(workers: 2, configureKey: true, new Dictionary<string, string> { ["Bitbudget:Role"] = "api" });
        using var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync("api-only");

        var search = await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } });

        Assert.Equal("queued", search.GetProperty("state").GetString());
        Assert.DoesNotContain(factory.Services.GetServices<IHostedService>(), s => s.GetType().Name.Contains("BackgroundJobServer", StringComparison.Ordinal));
        Assert.False(factory.Engine.Runs.ContainsKey("api-only"));
    }

    [Theory]
    [InlineData("Bitbudget:Role", "scheduler", "Bitbudget:Role must be 'all', 'api' or 'worker'; got 'scheduler'.")]
    [InlineData("Bitbudget:Store", "mysql", "Bitbudget:Store must be 'sqlite' or 'postgres'; got 'mysql'.")]
    [InlineData("Bitbudget:Store", "postgres", "Bitbudget:ConnectionString is required when Bitbudget:Store is 'postgres'")]
    public void ABadRoleOrStoreSettingStopsStartUpWithTheKeyAndWhatItTakes(string key, string value, string message)
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true, new Dictionary<string, string> { [key] = value });

        var error = Assert.Throws<OptionsValidationException>(() => factory.CreateClient());

        Assert.Contains(message, error.Message, StringComparison.Ordinal);
    }
}
