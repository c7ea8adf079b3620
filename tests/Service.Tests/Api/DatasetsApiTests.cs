using System.Net;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

public sealed class DatasetsApiTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    private readonly HttpClient client = factory.CreateAuthorizedClient();

    [Fact]
    public async Task UploadReturnsCreatedDatasetWithItsArrays()
    {
        var response = await client.PostBytesAsync("/v1/datasets", FakeSearchEngine.Dataset("arrays", samples: 16, labels: true));

        Assert.Equal(HttpStatusCode.Created, response.StatusCode);
        var dataset = await response.JsonAsync();
        Assert.StartsWith("dst_", dataset.GetProperty("id").GetString(), StringComparison.Ordinal);
        Assert.Equal(64, dataset.GetProperty("sha256").GetString()!.Length);
        Assert.Equal(16, dataset.GetProperty("samples").GetInt64());
        Assert.True(dataset.GetProperty("hasLabels").GetBoolean());
        var arrays = dataset.GetProperty("arrays").EnumerateArray().ToList();
        Assert.Equal(["image", "labels"], arrays.Select(a => a.GetProperty("name").GetString()));
        Assert.Equal([16L, 3, 32, 32], arrays[0].GetProperty("shape").EnumerateArray().Select(d => d.GetInt64()));
        Assert.Equal("<f4", arrays[0].GetProperty("dtype").GetString());
    }

    [Fact]
    public async Task SameBytesUploadedTwiceGiveTheSameDataset()
    {
        var bytes = FakeSearchEngine.Dataset("dataset-dedupe");
        var first = await client.PostBytesAsync("/v1/datasets", bytes);
        var second = await client.PostBytesAsync("/v1/datasets", bytes);

        Assert.Equal(HttpStatusCode.Created, first.StatusCode);
        Assert.Equal(HttpStatusCode.OK, second.StatusCode);
        Assert.Equal((await first.JsonAsync()).GetProperty("id").GetString(), (await second.JsonAsync()).GetProperty("id").GetString());
    }

    [Fact]
    public async Task GetReturnsTheStoredDatasetAndUnknownIdIsNotFound()
    {
        var id = (await (await client.PostBytesAsync("/v1/datasets", FakeSearchEngine.Dataset("get"))).JsonAsync()).GetProperty("id").GetString();

        var fetched = await (await client.GetAsync($"/v1/datasets/{id}")).JsonAsync();
        Assert.Equal(id, fetched.GetProperty("id").GetString());
        await (await client.GetAsync("/v1/datasets/dst_nope")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
    }

    [Fact]
    public async Task UnreadableDatasetIsRefusedWithTheEngineCode()
    {
        await (await client.PostBytesAsync("/v1/datasets", "PK\u0003\u0004 broken"u8.ToArray()))
            .AssertProblemAsync(HttpStatusCode.UnprocessableEntity, "dataset-invalid");
    }
}
