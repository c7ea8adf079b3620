using System.Globalization;
using System.Text.Json;
using Bitbudget.Service.Tests.Demo;
using Microsoft.Playwright;

namespace Bitbudget.Service.Tests.Web;

/// <summary>
/// The page at / in a real browser (Debian's chromium through Playwright) against the real service binary on loopback,
/// with the demo model and its retrain searched. What the charts draw is read back from ECharts' own option
/// (echarts.getInstanceByDom) and checked against the manifests the API serves. With BITBUDGET_SCREENSHOTS set to a
/// folder, each view is also written there as a PNG (scripts/screenshots.sh writes docs/).
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class PageBrowserTests(BrowserService browser, DemoFolderFixture demo) : IClassFixture<BrowserService>
{
    [Fact]
    public async Task PageLoadsWithoutAKeyAsksForOneKeepsItInTheTabAndListsTheSearches()
    {
        await browser.EnsureAsync(demo);
        var (page, errors) = await browser.NewPageAsync();

        var response = await page.GotoAsync("/");
        Assert.Equal(200, response!.Status);
        Assert.Contains("script-src 'self'", response.Headers["content-security-policy"], StringComparison.Ordinal);
        await page.WaitForSelectorAsync("#key-dialog[open]");
        await page.FillAsync("#key-input", "not-the-key");
        await page.ClickAsync("#key-form button[type=submit]");
        await page.WaitForSelectorAsync("#key-error:has-text('does not accept')");
        await page.FillAsync("#key-input", browser.ApiKey);
        await page.ClickAsync("#key-form button[type=submit]");

        // The fixture's two searches, newest first (a test that ran before may have added a reusing search of version 1).
        var (first, second) = browser.Searches;
        var rows = page.Locator($"#searches tbody tr[data-search-id='{first}'], #searches tbody tr[data-search-id='{second}']");
        await rows.First.WaitForAsync();
        Assert.Equal([second, first], await rows.EvaluateAllAsync<string[]>("rows => rows.map(r => r.dataset.searchId)"));
        var newest = await rows.First.InnerTextAsync();
        Assert.Contains("hive-monitor.onnx v2", newest, StringComparison.Ordinal);
        Assert.Contains("SQNR ≥ 30 dB", newest, StringComparison.Ordinal);
        Assert.Contains("succeeded", newest, StringComparison.Ordinal);
        var summary = (await browser.GetJsonAsync($"/v1/searches/{second}")).GetProperty("summary");
        Assert.Contains(summary.GetProperty("measured").GetDouble().ToString("F2", CultureInfo.InvariantCulture) + " dB", newest, StringComparison.Ordinal);
        Assert.Contains("hive-monitor.onnx v1", await rows.Nth(1).InnerTextAsync(), StringComparison.Ordinal);

        // The key lives in this tab's sessionStorage only.
        Assert.Equal(browser.ApiKey, await page.EvaluateAsync<string>("() => sessionStorage.getItem('bitbudget.apiKey')"));
        Assert.Equal(0, await page.EvaluateAsync<int>("() => localStorage.length"));
        var other = await page.Context.Browser!.NewContextAsync(new BrowserNewContextOptions { BaseURL = browser.BaseAddress.ToString() });
        var otherTab = await other.NewPageAsync();
        await otherTab.GotoAsync("/");
        await otherTab.WaitForSelectorAsync("#key-dialog[open]");
        await other.CloseAsync();

        await Screenshot(page, "page-searches.png");
        // The one expected error is the browser's own line for the refused wrong key (a 401 from /v1/searches).
        Assert.DoesNotContain(errors, e => !e.Contains("status of 401", StringComparison.Ordinal));
        await page.Context.CloseAsync();
    }

    [Fact]
    public async Task SearchViewDrawsOneHeatMapRowPerLayerWithTheChosenWidthMarkedAndTheChosenPointOnTheFrontier()
    {
        await browser.EnsureAsync(demo);
        var (first, _) = browser.Searches;
        var manifest = await browser.GetJsonAsync($"/v1/searches/{first}/manifest");
        var layers = manifest.GetProperty("layers").EnumerateArray().ToList();
        var (page, errors) = await browser.SignedInPageAsync($"#/search/{first}");
        await page.WaitForSelectorAsync("#heatmap canvas");
        await page.WaitForSelectorAsync("#frontier canvas");

        using var heatmap = JsonDocument.Parse(await page.EvaluateAsync<string>(Option("heatmap")));
        var option = heatmap.RootElement;
        var rows = option.GetProperty("yAxis")[0].GetProperty("data").EnumerateArray().Select(r => r.GetString()!).ToList();
        Assert.Equal(layers.Select(l => l.GetProperty("name").GetString()), rows.Select(r => r.Split(' ')[0]));
        var widths = option.GetProperty("xAxis")[0].GetProperty("data").EnumerateArray().Select(w => w.GetString()).ToList();
        Assert.Equal(["2-bit", "3-bit", "4-bit", "6-bit", "8-bit"], widths);
        var cells = option.GetProperty("series")[0].GetProperty("data");
        Assert.Equal(layers.Sum(l => l.GetProperty("sensitivity").GetArrayLength()), cells.GetArrayLength());
        var chosen = option.GetProperty("series")[1].GetProperty("data").EnumerateArray().ToList();
        Assert.Equal(layers.Count, chosen.Count);
        for (var row = 0; row < layers.Count; row++)
        {
            var mark = chosen.Single(c => c.GetProperty("value")[1].GetInt32() == row);
            Assert.Equal($"{layers[row].GetProperty("bits").GetInt32()}-bit", widths[mark.GetProperty("value")[0].GetInt32()]);
        }

        // Hovering a cell shows its numbers (the manifest's SQNR of that layer at that width).
        var sqnr = layers[0].GetProperty("sensitivity").EnumerateArray().Single(s => s.GetProperty("bits").GetInt32() == 4).GetProperty("metrics").GetProperty("sqnrDb").GetDouble();
        await page.EvaluateAsync("() => echarts.getInstanceByDom(document.getElementById('heatmap')).dispatchAction({ type: 'showTip', seriesIndex: 0, dataIndex: 2 })");
        var tip = page.Locator("#heatmap div:has-text('SQNR')").Last;
        await tip.WaitForAsync();
        Assert.Contains(sqnr.ToString("F2", CultureInfo.InvariantCulture) + " dB", await tip.InnerTextAsync(), StringComparison.Ordinal);

        using var frontier = JsonDocument.Parse(await page.EvaluateAsync<string>(Option("frontier")));
        var series = frontier.RootElement.GetProperty("series").EnumerateArray().ToDictionary(s => s.GetProperty("name").GetString()!);
        var totals = manifest.GetProperty("totals");
        var point = Assert.Single(series["chosen (predicted)"].GetProperty("data").EnumerateArray());
        Assert.Equal(totals.GetProperty("bytes").GetInt64(), point[0].GetInt64());
        Assert.Equal(totals.GetProperty("predicted").GetDouble(), point[1].GetDouble(), 9);
        Assert.Equal(totals.GetProperty("measured").GetDouble(), series["chosen (measured)"].GetProperty("data")[0][1].GetDouble(), 9);
        Assert.True(series.ContainsKey("uniform 4-bit") && series.ContainsKey("uniform 8-bit"), string.Join(", ", series.Keys));
        var rounds = series["validation rounds"].GetProperty("markLine").GetProperty("data").EnumerateArray().Count(d => d.GetProperty("name").GetString()!.StartsWith("validation", StringComparison.Ordinal));
        Assert.Equal(manifest.GetProperty("outcome").GetProperty("validationRounds").GetInt32(), rounds);
        Assert.Equal(layers.Count, await page.Locator("#layers tbody tr").CountAsync());

        await Screenshot(page, "page-search.png");
        Assert.Empty(errors);
        await page.Context.CloseAsync();
    }

    [Fact]
    public async Task ASearchThatReusedASweepCountsEveryTrialItRestsOnAndSaysHowManyItMeasured()
    {
        var id = await browser.ReusingSearchAsync(demo);
        var (first, _) = browser.Searches;
        var manifest = await browser.GetJsonAsync($"/v1/searches/{id}/manifest");
        var trials = await browser.GetJsonAsync($"/v1/searches/{id}/trials?limit=1000");
        var sweep = (await browser.GetJsonAsync($"/v1/searches/{first}/trials?limit=1000")).GetProperty("items").EnumerateArray().Count(t => t.GetProperty("kind").GetString() == "sensitivity");
        Assert.Equal(sweep, trials.GetProperty("reused").GetInt32());

        var (page, errors) = await browser.SignedInPageAsync($"#/search/{id}");
        var card = page.Locator("#trials-card");
        await card.WaitForAsync();
        var text = await card.InnerTextAsync();

        // The card's count is the manifest's; the note says what this search measured and what it took from the first.
        Assert.Contains($"{manifest.GetProperty("trials").GetInt32()} / {manifest.GetProperty("outcome").GetProperty("validationRounds").GetInt32()}", text, StringComparison.Ordinal);
        Assert.Contains($"{manifest.GetProperty("trials").GetInt32() - sweep} measured here, {sweep} reused", text, StringComparison.Ordinal);
        Assert.Empty(errors);
        await page.Context.CloseAsync();
    }

    [Fact]
    public async Task CompareShowsTheLayerTheRetrainChanged()
    {
        await browser.EnsureAsync(demo);
        var (first, second) = browser.Searches;
        var before = await browser.GetJsonAsync($"/v1/searches/{first}/manifest");
        var after = await browser.GetJsonAsync($"/v1/searches/{second}/manifest");
        var changed = before.GetProperty("layers").EnumerateArray()
            .Zip(after.GetProperty("layers").EnumerateArray())
            .Where(p => p.First.GetProperty("bits").GetInt32() != p.Second.GetProperty("bits").GetInt32())
            .Select(p => p.First.GetProperty("name").GetString())
            .ToList();
        Assert.NotEmpty(changed);

        var (page, errors) = await browser.SignedInPageAsync();
        await page.Locator($"tr[data-search-id='{first}'] input[type=checkbox]").CheckAsync();
        await page.Locator($"tr[data-search-id='{second}'] input[type=checkbox]").CheckAsync();
        await page.ClickAsync("#compare-picked");
        await page.WaitForSelectorAsync("#compare-layers");
        await page.WaitForSelectorAsync("#compare-heatmap canvas");

        Assert.EndsWith($"#/compare/{first}/{second}", page.Url, StringComparison.Ordinal);
        var marked = await page.Locator("#compare-layers tr[data-status='changed']").EvaluateAllAsync<string[]>("rows => rows.map(r => r.dataset.layer)");
        Assert.Equal(changed, marked);
        var row = await page.Locator($"#compare-layers tr[data-layer='{changed[0]}']").InnerTextAsync();
        var bitsBefore = before.GetProperty("layers").EnumerateArray().Single(l => l.GetProperty("name").GetString() == changed[0]).GetProperty("bits").GetInt32();
        var bitsAfter = after.GetProperty("layers").EnumerateArray().Single(l => l.GetProperty("name").GetString() == changed[0]).GetProperty("bits").GetInt32();
        Assert.Contains(string.Create(CultureInfo.InvariantCulture, $"{bitsBefore}\t{bitsAfter}\t{bitsAfter - bitsBefore:+0;-0}"), row, StringComparison.Ordinal);
        Assert.Contains("hive-monitor.onnx v1", await page.Locator("h1").InnerTextAsync(), StringComparison.Ordinal);

        await Screenshot(page, "page-compare.png");
        Assert.Empty(errors);
        await page.Context.CloseAsync();
    }

    /// <summary>A script returning the chart's option as JSON text (functions dropped) for the chart in element <paramref name="id"/>.</summary>
    private static string Option(string id) => $"() => JSON.stringify(echarts.getInstanceByDom(document.getElementById('{id}')).getOption())";

    private static async Task Screenshot(IPage page, string fileName)
    {
        if (Environment.GetEnvironmentVariable("BITBUDGET_SCREENSHOTS") is { Length: > 0 } folder)
        {
            Directory.CreateDirectory(folder);
            await page.ScreenshotAsync(new PageScreenshotOptions { Path = Path.Combine(folder, fileName), FullPage = true });
        }
    }
}
