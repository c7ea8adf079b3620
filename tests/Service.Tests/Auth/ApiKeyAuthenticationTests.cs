using System.Net;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Auth;

public sealed class ApiKeyAuthenticationTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    [Theory]
    [InlineData("/v1/models")]
    [InlineData("/v1/models/mdl_x")]
    [InlineData("/v1/datasets/dst_x")]
    [InlineData("/v1/searches")]
    [InlineData("/v1/searches/srch_x/manifest")]
    public async Task RequestWithoutKeyIsUnauthorized(string path)
    {
        var response = await factory.CreateClient().GetAsync(path);

        var problem = await response.AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");
        Assert.Equal("Bearer", response.Headers.WwwAuthenticate.Single().Scheme);
        Assert.Contains("Authorization: Bearer", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("test-key-3f9c2b")]
    [InlineData("test-key-3f9c2a-and-more")]
    [InlineData("")]
    public async Task RequestWithWrongKeyIsUnauthorized(string key)
    {
        var client = factory.CreateClient();
        client.DefaultRequestHeaders.TryAddWithoutValidation("Authorization", "Bearer " + key);

        var problem = await (await client.GetAsync("/v1/models")).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");

        Assert.DoesNotContain(key.Length > 0 ? key : "\u0000", problem.ToString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task UploadWithoutKeyIsRefusedBeforeTheBodyIsStored()
    {
        var response = await factory.CreateClient().PostBytesAsync("/v1/models", FakeSearchEngine.Model("no-key"));

        await response.AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");
        Assert.False(Directory.Exists(Path.Combine(factory.DataFolder, "blobs")) && Directory.EnumerateFiles(Path.Combine(factory.DataFolder, "blobs"), "*", SearchOption.AllDirectories).Any());
    }

    [Theory]
    [InlineData("POST", "/v1/models", "application/json")]
    [InlineData("POST", "/v1/datasets", "text/plain")]
    [InlineData("POST", "/v1/searches", "application/octet-stream")]
    [InlineData("PUT", "/v1/models", "application/octet-stream")]
    public async Task TheKeyIsAskedForBeforeTheContentTypeOrMethodIsJudged(string method, string path, string contentType)
    {
        using var request = new HttpRequestMessage(new HttpMethod(method), path) { Content = new ByteArrayContent("{}"u8.ToArray()) };
        request.Content.Headers.ContentType = new System.Net.Http.Headers.MediaTypeHeaderValue(contentType);

        // Before, routing answered 415 (or 405) to anyone, telling an anonymous caller what the API takes.
        await (await factory.CreateClient().SendAsync(request)).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");
    }

    [Fact]
    public async Task WithTheKeyAWrongContentTypeIsStillA415()
    {
        using var content = new ByteArrayContent("{}"u8.ToArray());
        content.Headers.ContentType = new System.Net.Http.Headers.MediaTypeHeaderValue("application/json");

        await (await factory.CreateAuthorizedClient().PostAsync("/v1/models", content)).AssertProblemAsync(HttpStatusCode.UnsupportedMediaType, "unsupported-media-type");
    }

    [Fact]
    public async Task RightKeyIsAccepted()
    {
        var response = await factory.CreateAuthorizedClient().GetAsync("/v1/models");
        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
    }

    [Fact]
    public async Task HealthAndOpenApiNeedNoKey()
    {
        var client = factory.CreateClient();
        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync("/healthz")).StatusCode);
        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync("/openapi/v1.json")).StatusCode);
        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync("/metrics")).StatusCode);
    }
}
