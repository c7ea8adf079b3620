using System.Net;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Hosting;

/// <summary>The page's files load without a key (they hold no data); every API route still needs one.</summary>
public sealed class WebPageTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    [Theory]
    [InlineData("/", "text/html")]
    [InlineData("/index.html", "text/html")]
    [InlineData("/app.js", "text/javascript")]
    [InlineData("/app.css", "text/css")]
    [InlineData("/lib/echarts.min.js", "text/javascript")]
    public async Task PageFilesLoadWithoutAKeyAndCarryTheContentSecurityPolicy(string path, string mediaType)
    {
        using var anonymous = factory.CreateClient();

        var response = await anonymous.GetAsync(path);

        Assert.Equal(HttpStatusCode.OK, response.StatusCode);
        Assert.Equal(mediaType, response.Content.Headers.ContentType?.MediaType);
        Assert.Equal(WebPage.ContentSecurityPolicy, string.Join(";", response.Headers.GetValues("Content-Security-Policy")));
        Assert.Equal("nosniff", string.Join(",", response.Headers.GetValues("X-Content-Type-Options")));
        Assert.True((await response.Content.ReadAsByteArrayAsync()).Length > 0);
    }

    [Fact]
    public async Task TheChartingLibraryIsApacheEChartsAsTheLockFilePinsIt()
    {
        using var anonymous = factory.CreateClient();
        var script = await anonymous.GetStringAsync("/lib/echarts.min.js");
        var lockFile = System.Text.Json.JsonDocument.Parse(File.ReadAllText(Path.Combine(RepositoryRoot(), "Service", "Web", "package-lock.json")));
        var version = lockFile.RootElement.GetProperty("packages").GetProperty("node_modules/echarts").GetProperty("version").GetString()!;

        Assert.Contains("Apache", script[..2000], StringComparison.Ordinal);
        Assert.Contains($"\"{version}\"", script, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("/v1/searches")]
    [InlineData("/v1/models?name=hive-monitor.onnx")]
    [InlineData("/jobs")]
    public async Task ApiRoutesStillNeedTheKey(string path)
    {
        using var anonymous = factory.CreateClient();
        var response = await anonymous.GetAsync(path);
        Assert.True(response.StatusCode is HttpStatusCode.Unauthorized or HttpStatusCode.NotFound, $"{path}: {response.StatusCode}");
        Assert.NotEqual("text/html", response.Content.Headers.ContentType?.MediaType);
    }

    private static string RepositoryRoot()
    {
        var folder = new DirectoryInfo(AppContext.BaseDirectory);
        while (folder is not null && !File.Exists(Path.Combine(folder.FullName, "Search.sln")))
        {
            folder = folder.Parent;
        }

        return folder?.FullName ?? throw new InvalidOperationException("Search.sln not found above " + AppContext.BaseDirectory);
    }
}
