using System.Net;
using Bitbudget.Service.Tests.Support;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Tests.Hosting;

/// <summary>How the host starts with settings other than the test defaults; each test owns its host.</summary>
public sealed class HostStartupTests
{
    [Fact]
    public async Task WithoutConfiguredKeysTheGeneratedKeyFileOpensTheApi()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: false);
        using var anonymous = factory.CreateClient();
        await (await anonymous.GetAsync("/v1/models")).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");

        var key = (await File.ReadAllTextAsync(Path.Combine(factory.DataFolder, "api-key"))).Trim();
        using var client = factory.CreateAuthorizedClient(key);

        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync("/v1/models")).StatusCode);
        var logs = string.Concat(Directory.GetFiles(Path.Combine(factory.DataFolder, "logs")).Select(ReadShared));
        Assert.Contains(Path.Combine(factory.DataFolder, "api-key"), logs, StringComparison.Ordinal);
        Assert.DoesNotContain(key, logs, StringComparison.Ordinal);
    }

    [Fact]
    public async Task DashboardIsOffByDefault()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true);
        await (await factory.CreateAuthorizedClient().GetAsync("/jobs")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
    }

    [Fact]
    public async Task EnabledDashboardNeedsTheApiKey()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true, new Dictionary<string, string> { ["Bitbudget:Dashboard"] = "true" });

        await (await factory.CreateClient().GetAsync("/jobs")).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");
        var page = await factory.CreateAuthorizedClient().GetAsync("/jobs");

        Assert.Equal(HttpStatusCode.OK, page.StatusCode);
        Assert.Contains("Hangfire", await page.Content.ReadAsStringAsync(), StringComparison.Ordinal);
    }

    [Fact]
    public void InvalidSettingsStopTheHostAtStart()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true, new Dictionary<string, string> { ["Bitbudget:QueuePollIntervalMs"] = "5" });

        var error = Assert.Throws<OptionsValidationException>(() => factory.CreateClient());

        Assert.Contains("QueuePollIntervalMs", error.Message, StringComparison.Ordinal);
    }

    private static string ReadShared(string path)
    {
        using var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.ReadWrite);
        using var reader = new StreamReader(stream);
        return reader.ReadToEnd();
    }
}
