using System.Net;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

public sealed class ModelsApiTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    private readonly HttpClient client = factory.CreateAuthorizedClient();

    [Fact]
    public async Task UploadReturnsCreatedModelWithItsLayers()
    {
        var bytes = FakeSearchEngine.Model("upload-created");
        var response = await client.PostBytesAsync("/v1/models?name=classifier.onnx", bytes);

        Assert.Equal(HttpStatusCode.Created, response.StatusCode);
        var model = await response.JsonAsync();
        var id = model.GetProperty("id").GetString();
        Assert.Equal($"/v1/models/{id}", response.Headers.Location?.ToString());
        Assert.Equal(Convert.ToHexStringLower(System.Security.Cryptography.SHA256.HashData(bytes)), model.GetProperty("sha256").GetString());
        Assert.Equal("classifier.onnx", model.GetProperty("name").GetString());
        Assert.Equal(bytes.Length, model.GetProperty("bytes").GetInt64());
        Assert.Equal(13, model.GetProperty("opset").GetInt64());
        Assert.Equal(["conv1", "conv2", "fc"], model.GetProperty("layers").EnumerateArray().Select(l => l.GetProperty("name").GetString()));
        Assert.Equal("image", model.GetProperty("inputs")[0].GetProperty("name").GetString());
        Assert.True(File.Exists(Path.Combine(factory.DataFolder, "blobs", model.GetProperty("sha256").GetString()![..2], model.GetProperty("sha256").GetString()!)));
    }

    [Fact]
    public async Task SameBytesUploadedTwiceGiveTheSameModel()
    {
        var bytes = FakeSearchEngine.Model("dedupe");
        var first = await client.PostBytesAsync("/v1/models?name=a.onnx", bytes);
        var second = await client.PostBytesAsync("/v1/models?name=b.onnx", bytes);

        Assert.Equal(HttpStatusCode.Created, first.StatusCode);
        Assert.Equal(HttpStatusCode.OK, second.StatusCode);
        var id = (await first.JsonAsync()).GetProperty("id").GetString();
        Assert.Equal(id, (await second.JsonAsync()).GetProperty("id").GetString());
        var listed = await (await client.GetAsync("/v1/models")).JsonAsync();
        Assert.Single(listed.EnumerateArray(), m => m.GetProperty("id").GetString() == id);
    }

    [Fact]
    public async Task GetReturnsTheStoredModel()
    {
        var created = await (await client.PostBytesAsync("/v1/models?name=get.onnx", FakeSearchEngine.Model("get"))).JsonAsync();
        var id = created.GetProperty("id").GetString();

        var fetched = await (await client.GetAsync($"/v1/models/{id}")).JsonAsync();

        Assert.Equal(created.GetProperty("sha256").GetString(), fetched.GetProperty("sha256").GetString());
        Assert.Equal(3, fetched.GetProperty("layers").GetArrayLength());
    }

    [Fact]
    public async Task UnknownModelIdIsNotFound()
    {
        var problem = await (await client.GetAsync("/v1/models/mdl_missing")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
        Assert.Contains("mdl_missing", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task BytesThatAreNoModelAreRefusedWithTheEngineCode()
    {
        var response = await client.PostBytesAsync("/v1/models", "not a model"u8.ToArray());
        await response.AssertProblemAsync(HttpStatusCode.UnprocessableEntity, "model-not-onnx");
    }

    [Fact]
    public async Task AlreadyQuantizedModelIsRefused()
    {
        var response = await client.PostBytesAsync("/v1/models", FakeSearchEngine.Model("q", options: "quantized"));
        var problem = await response.AssertProblemAsync(HttpStatusCode.UnprocessableEntity, "model-already-quantized");
        Assert.Contains("FP32", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task ModelWithMoreLayersThanTheLimitIsRefused()
    {
        var layers = Enumerable.Range(0, 6).Select(i => $"l{i} Conv 10");
        var response = await client.PostBytesAsync("/v1/models", FakeSearchEngine.Model("many", layers: layers));
        await response.AssertProblemAsync(HttpStatusCode.UnprocessableEntity, "model-too-many-layers");
    }

    [Fact]
    public async Task UploadOverTheSizeLimitIsPayloadTooLarge()
    {
        var bytes = new byte[ServiceFactory.MaxModelBytes + 1];
        var response = await client.PostBytesAsync("/v1/models", bytes);
        var problem = await response.AssertProblemAsync(HttpStatusCode.RequestEntityTooLarge, "payload-too-large");
        Assert.Contains("4096", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task UploadWithoutContentLengthOverTheLimitIsStillRefused()
    {
        var content = new StreamContent(new MemoryStream(new byte[ServiceFactory.MaxModelBytes * 3]));
        content.Headers.ContentType = new("application/octet-stream");
        using var request = new HttpRequestMessage(HttpMethod.Post, "/v1/models") { Content = content };
        request.Headers.TransferEncodingChunked = true;
        await (await client.SendAsync(request)).AssertProblemAsync(HttpStatusCode.RequestEntityTooLarge, "payload-too-large");
    }

    [Fact]
    public async Task EmptyBodyIsAnInvalidRequest()
    {
        var problem = await (await client.PostBytesAsync("/v1/models", [])).AssertProblemAsync(HttpStatusCode.BadRequest, "invalid-request");
        Assert.True(problem.GetProperty("errors").TryGetProperty("body", out _));
    }
}
