using System.Net;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.EndToEnd;

/// <summary>
/// Against the real server (Kestrel, not the in-memory test server): a request target or headers beyond the
/// service's limits reach the service and are answered as problems. Kestrel answers these itself with an empty
/// body at its own limits (8 KiB request line, 32 KiB headers by default), before any application code runs.
/// </summary>
public sealed class KestrelLimitTests : IAsyncLifetime
{
    private readonly string data = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));
    private ServiceProcess? service;

    public async Task InitializeAsync()
    {
        Directory.CreateDirectory(data);
        service = await ServiceProcess.StartAsync(data);
    }

    [Fact]
    public async Task ALongRequestTargetIsA414ProblemFromTheRealServer()
    {
        var response = await service!.Client.GetAsync("/v1/models/" + new string('m', 9000));

        await response.AssertProblemAsync(HttpStatusCode.RequestUriTooLong, "uri-too-long");
    }

    [Fact]
    public async Task LargeHeadersAreA431ProblemFromTheRealServer()
    {
        using var request = new HttpRequestMessage(HttpMethod.Get, "/v1/models");
        request.Headers.Add("X-Padding", new string('h', 40_000));

        await (await service!.Client.SendAsync(request)).AssertProblemAsync(HttpStatusCode.RequestHeaderFieldsTooLarge, "headers-too-large");
    }

    public Task DisposeAsync()
    {
        service?.Dispose();
        Directory.Delete(data, recursive: true);
        return Task.CompletedTask;
    }
}
