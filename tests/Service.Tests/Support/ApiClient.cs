using System.Net;
using System.Net.Http.Headers;
using System.Net.Http.Json;
using System.Text.Json;

namespace Bitbudget.Service.Tests.Support;

/// <summary>Small helpers over the HTTP API that the functional tests share.</summary>
internal static class ApiClient
{
    public static async Task<HttpResponseMessage> PostBytesAsync(this HttpClient client, string url, byte[] bytes)
    {
        var content = new ByteArrayContent(bytes);
        content.Headers.ContentType = new MediaTypeHeaderValue("application/octet-stream");
        return await client.PostAsync(url, content);
    }

    public static async Task<JsonElement> JsonAsync(this HttpResponseMessage response)
    {
        var text = await response.Content.ReadAsStringAsync();
        return JsonDocument.Parse(text).RootElement.Clone();
    }

    /// <summary>Uploads a fake model and dataset and returns their ids.</summary>
    public static async Task<(string ModelId, string DatasetId)> UploadAsync(this HttpClient client, string tag, byte[]? model = null, byte[]? dataset = null)
    {
        var m = await client.PostBytesAsync($"/v1/models?name={tag}", model ?? FakeSearchEngine.Model(tag));
        Assert.True(m.IsSuccessStatusCode, await m.Content.ReadAsStringAsync());
        var d = await client.PostBytesAsync("/v1/datasets", dataset ?? FakeSearchEngine.Dataset(tag));
        Assert.True(d.IsSuccessStatusCode, await d.Content.ReadAsStringAsync());
        return ((await m.JsonAsync()).GetProperty("id").GetString()!, (await d.JsonAsync()).GetProperty("id").GetString()!);
    }

    public static async Task<JsonElement> StartSearchAsync(this HttpClient client, object body, string? idempotencyKey = null)
    {
        using var request = new HttpRequestMessage(HttpMethod.Post, "/v1/searches") { Content = JsonContent.Create(body) };
        if (idempotencyKey is not null)
        {
            request.Headers.Add("Idempotency-Key", idempotencyKey);
        }

        var response = await client.SendAsync(request);
        Assert.True(response.StatusCode == HttpStatusCode.Accepted, await response.Content.ReadAsStringAsync());
        return await response.JsonAsync();
    }

    /// <summary>Polls the search until it reaches one of the states (bounded, so a stuck job fails the test).</summary>
    public static async Task<JsonElement> WaitForStateAsync(this HttpClient client, string id, params string[] states)
    {
        var deadline = DateTime.UtcNow.AddSeconds(30);
        while (true)
        {
            var search = await (await client.GetAsync($"/v1/searches/{id}")).JsonAsync();
            var state = search.GetProperty("state").GetString();
            if (states.Contains(state))
            {
                return search;
            }

            Assert.True(DateTime.UtcNow < deadline, $"Search {id} stayed {state}: {search}");
            await Task.Delay(50);
        }
    }

    /// <summary>Asserts an RFC 9457 problem with the given status and type code, and returns it.</summary>
    public static async Task<JsonElement> AssertProblemAsync(this HttpResponseMessage response, HttpStatusCode status, string code)
    {
        var body = await response.Content.ReadAsStringAsync();
        Assert.True(status == response.StatusCode, $"Expected {status}, got {response.StatusCode}: {body}");
        Assert.Equal("application/problem+json", response.Content.Headers.ContentType?.MediaType);
        var problem = JsonDocument.Parse(body).RootElement.Clone();
        Assert.Equal("https://bitbudget.dev/problems/" + code, problem.GetProperty("type").GetString());
        Assert.Equal((int)status, problem.GetProperty("status").GetInt32());
        Assert.False(string.IsNullOrWhiteSpace(problem.GetProperty("title").GetString()));
        Assert.False(string.IsNullOrWhiteSpace(problem.GetProperty("detail").GetString()));
        Assert.StartsWith("/", problem.GetProperty("instance").GetString());
        Assert.DoesNotContain("   at ", body, StringComparison.Ordinal);
        return problem;
    }
}
