using System.Net;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Hosting;

/// <summary>The job dashboard's POST endpoints with a body that is not a form: a 415 problem, not Hangfire's 500.</summary>
public sealed class DashboardFormGuardTests : IDisposable
{
    private readonly ServiceFactory factory = new(workers: 0, configureKey: true, new Dictionary<string, string> { ["Bitbudget:Dashboard"] = "true" });

    [Theory]
    [InlineData("application/json")]
    [InlineData("application/octet-stream")]
    public async Task StatsWithABodyThatIsNotAFormIsA415Problem(string contentType)
    {
        using var content = new ByteArrayContent("{\"x\": 1}"u8.ToArray());
        content.Headers.ContentType = new System.Net.Http.Headers.MediaTypeHeaderValue(contentType);

        var problem = await (await factory.CreateAuthorizedClient().PostAsync("/jobs/stats", content)).AssertProblemAsync(HttpStatusCode.UnsupportedMediaType, "unsupported-media-type");

        Assert.Contains("application/x-www-form-urlencoded", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task StatsWithAFormStillAnswersAndWithoutAKeyIsUnauthorized()
    {
        using var form = new FormUrlEncodedContent([new KeyValuePair<string, string>("metrics[]", "enqueued:count")]);
        Assert.Equal(HttpStatusCode.OK, (await factory.CreateAuthorizedClient().PostAsync("/jobs/stats", form)).StatusCode);

        using var json = new StringContent("{}", System.Text.Encoding.UTF8, "application/json");
        await (await factory.CreateClient().PostAsync("/jobs/stats", json)).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");
    }

    public void Dispose() => factory.Dispose();
}
