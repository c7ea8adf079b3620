using System.Net;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Hosting;

/// <summary>
/// A request target or headers beyond the service's limits get RFC 9457 problems (414 uri-too-long, 431
/// headers-too-large), not Kestrel's empty bodies; EndToEnd/KestrelLimitTests checks the real server lets
/// such requests reach the service.
/// </summary>
public sealed class RequestSizeGateTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    [Fact]
    public async Task ARequestTargetLongerThanTheLimitIsA414Problem()
    {
        var url = "/v1/models/" + new string('m', RequestSizeGate.MaxTargetBytes);

        var problem = await (await factory.CreateAuthorizedClient().GetAsync(url)).AssertProblemAsync(HttpStatusCode.RequestUriTooLong, "uri-too-long");

        Assert.Contains("at most 8192", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task HeadersLargerThanTheLimitAreA431Problem()
    {
        var client = factory.CreateAuthorizedClient();
        client.DefaultRequestHeaders.Add("X-Padding", new string('h', RequestSizeGate.MaxHeaderBytes));

        await (await client.GetAsync("/v1/models")).AssertProblemAsync(HttpStatusCode.RequestHeaderFieldsTooLarge, "headers-too-large");
    }

    [Fact]
    public async Task ATargetJustUnderTheLimitIsServed()
    {
        var url = "/v1/models/" + new string('m', RequestSizeGate.MaxTargetBytes - 100);

        await (await factory.CreateAuthorizedClient().GetAsync(url)).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
    }
}
