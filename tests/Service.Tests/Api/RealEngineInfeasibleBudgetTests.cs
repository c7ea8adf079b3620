using System.Net;
using System.Text.RegularExpressions;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// A budget no assignment can meet is an answer, not a crash: through the real engine (ONNX Runtime on the
/// hive-monitor demo model) the search succeeds with feasible = false, a message with the numbers, and every
/// artifact but the quantized model downloadable. Before the fix these searches failed three times with
/// "Cannot store 'NaN' values" (SQLite refuses NaN, which the engine gives for the error of no assignment).
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class RealEngineInfeasibleBudgetTests : IClassFixture<RealEngineFixture>
{
    private readonly RealEngineFixture fixture;
    private readonly DemoFolderFixture demo;
    private readonly HttpClient client;

    public RealEngineInfeasibleBudgetTests(RealEngineFixture fixture, DemoFolderFixture demo)
    {
        this.fixture = fixture;
        this.demo = demo;
        client = fixture.Factory.CreateAuthorizedClient();
    }

    public static TheoryData<string, string> Budgets => new()
    {
        // 34,120 weights cannot fit in 1,000 bytes at any candidate width.
        { "bytes", "smallest assignment the candidates allow is" },
        // Two bits per weight leave nothing for the per-channel scales, so 2 bits everywhere is already above it.
        { "averageBits", "smallest assignment the candidates allow is" },
        // 8-bit weights give about 50 dB on this model (6.02 dB per bit, common practice); 80 dB is out of reach.
        { "sqnr", "8 bits everywhere gives" },
    };

    [Theory]
    [MemberData(nameof(Budgets))]
    public async Task InfeasibleBudgetSucceedsWithTheNumbersAndEveryArtifactButTheModel(string kind, string says)
    {
        var (modelId, _, datasetId, _) = await fixture.EnsureBaselineAsync(client, demo.Folder);
        object budget = kind switch
        {
            "bytes" => new { bytes = 1000 },
            "averageBits" => new { averageBits = 2.0 },
            _ => new { metric = "sqnr", atLeast = 80 },
        };
        var started = await client.StartSearchAsync(new { modelId, datasetId, budget, bits = new[] { 2, 4, 8 } });
        var id = started.GetProperty("id").GetString()!;

        var search = await RealEngineWalkthroughTests.WaitForEndAsync(client, id);

        Assert.True(search.GetProperty("state").GetString() == "succeeded", search.ToString());
        var summary = search.GetProperty("summary");
        Assert.False(summary.GetProperty("feasible").GetBoolean());
        var message = summary.GetProperty("message").GetString()!;
        Assert.StartsWith("Infeasible: ", message, StringComparison.Ordinal);
        Assert.Contains(says, message, StringComparison.Ordinal);
        Assert.Matches(new Regex(@"\d"), message);
        // No assignment was chosen, so there is no size and no error to report: null, never 0 or "NaN".
        foreach (var total in new[] { "bytes", "averageBits", "compression", "predicted", "measured" })
        {
            Assert.Equal(System.Text.Json.JsonValueKind.Null, summary.GetProperty(total).ValueKind);
        }

        var model = await client.GetAsync($"/v1/searches/{id}/model");
        var problem = await model.AssertProblemAsync(HttpStatusCode.Conflict, "budget-infeasible");
        Assert.Contains(message, problem.GetProperty("detail").GetString(), StringComparison.Ordinal);

        var manifest = await (await client.GetAsync($"/v1/searches/{id}/manifest")).JsonAsync();
        Assert.False(manifest.GetProperty("outcome").GetProperty("feasible").GetBoolean());
        Assert.Equal(message, manifest.GetProperty("outcome").GetProperty("message").GetString());

        var frontier = await client.GetAsync($"/v1/searches/{id}/frontier");
        Assert.Equal(HttpStatusCode.OK, frontier.StatusCode);
        Assert.True((await frontier.JsonAsync()).GetProperty("points").GetArrayLength() > 1);
        var csv = (await client.GetStringAsync($"/v1/searches/{id}/sensitivity")).Split('\n', StringSplitOptions.RemoveEmptyEntries);
        Assert.Equal(1 + (4 * 3), csv.Length);

        // The reference trial's infinite SQNR is one form everywhere: the named literal in the trials
        // (as the store keeps it) and in the manifest the engine wrote.
        var trials = await (await client.GetAsync($"/v1/searches/{id}/trials?limit=1")).JsonAsync();
        Assert.Equal("Infinity", trials.GetProperty("items")[0].GetProperty("metrics").GetProperty("sqnrDb").GetString());
        Assert.Equal("Infinity", manifest.GetProperty("reference").GetProperty("sqnrDb").GetString());
        await fixture.AssertNothingLostAsync(client);
    }
}
