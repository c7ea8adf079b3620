using System.Net;
using System.Text;
using Bitbudget.Service.Tests.Support;

namespace Bitbudget.Service.Tests.Problems;

/// <summary>
/// Errors in what a client sent say which parameter or field, and what it takes, in JSON's own words: before,
/// a query value that did not parse gave "The request failed." and a JSON body error named .NET types
/// ("could not be converted to Bitbudget.Service.Searches.SearchRequest").
/// </summary>
public sealed class ProblemExceptionHandlerTests(ServiceFactory factory) : IClassFixture<ServiceFactory>
{
    [Theory]
    [InlineData("/v1/searches?limit=abc", "limit", "Parameter 'limit' must be a whole number; got 'abc'.")]
    [InlineData("/v1/searches/srch_x/trials?offset=1.5", "offset", "Parameter 'offset' must be a whole number; got '1.5'.")]
    public async Task AQueryValueThatDoesNotParseNamesTheParameterAndWhatItTakes(string url, string field, string detail)
    {
        var problem = await (await factory.CreateAuthorizedClient().GetAsync(url)).AssertProblemAsync(HttpStatusCode.BadRequest, "invalid-request");

        Assert.Equal(detail, problem.GetProperty("detail").GetString());
        Assert.Equal(detail, problem.GetProperty("errors").GetProperty(field)[0].GetString());
    }

    [Theory]
    [InlineData("""{"modelId": 5}""", "modelId", "modelId must be a string.")]
    [InlineData("""{"budget": {"metric": "sqnr", "bytes": "lots"}}""", "budget.bytes", "budget.bytes must be a whole number.")]
    [InlineData("""{"budget": {"metric": "sqnr", "atLeast": true}}""", "budget.atLeast", "budget.atLeast must be a number.")]
    [InlineData("""{"bits": "4,8"}""", "bits", "bits must be an array of whole numbers.")]
    [InlineData("""{"bits": [4, "8"]}""", "bits[1]", "bits[1] must be a whole number.")]
    [InlineData("""{"activations": "yes"}""", "activations", "activations must be true or false.")]
    [InlineData("""{"biasCorrection": 1}""", "biasCorrection", "biasCorrection must be true or false.")]
    [InlineData("""{"pin": {"conv1": "four"}}""", "pin.conv1", "pin.conv1 must be a whole number.")]
    [InlineData("""{"budget": 30}""", "budget", "budget must be an object with the fields metric, atLeast, atMost, bytes, averageBits.")]
    public async Task AJsonFieldOfTheWrongTypeIsNamedWithTheJsonTypeItTakes(string body, string field, string detail)
    {
        var problem = await PostSearchAsync(body);

        Assert.Equal(detail, problem.GetProperty("detail").GetString());
        Assert.Equal(detail, problem.GetProperty("errors").GetProperty(field)[0].GetString());
    }

    [Fact]
    public async Task ABodyThatIsNotAnObjectSaysWhatItMustBe()
    {
        var problem = await PostSearchAsync("[1, 2, 3]");

        Assert.StartsWith("The body is not a valid search request: it must be an object with the fields modelId, datasetId, budget,", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
    }

    [Fact]
    public async Task AnUnknownFieldIsNamedWithTheFieldsThereAre()
    {
        var problem = await PostSearchAsync("""{"modelId": "m", "budgte": {}}""");

        var detail = problem.GetProperty("detail").GetString()!;
        Assert.StartsWith("Unknown field 'budgte' in the search request; the fields are modelId, datasetId, budget, bits,", detail, StringComparison.Ordinal);
        Assert.DoesNotContain("Bitbudget.", detail, StringComparison.Ordinal);
    }

    [Fact]
    public async Task MalformedJsonSaysWhere()
    {
        var problem = await PostSearchAsync("{\"modelId\": \"m\",\n \"budget\": {]}");

        var detail = problem.GetProperty("detail").GetString()!;
        Assert.StartsWith("The body is not a valid search request: it is not valid JSON at line 2, byte ", detail, StringComparison.Ordinal);
        Assert.DoesNotContain("System.", detail, StringComparison.Ordinal);
        Assert.DoesNotContain("Bitbudget.", detail, StringComparison.Ordinal);
    }

    private async Task<System.Text.Json.JsonElement> PostSearchAsync(string body)
    {
        using var content = new StringContent(body, Encoding.UTF8, "application/json");
        var response = await factory.CreateAuthorizedClient().PostAsync("/v1/searches", content);
        var problem = await response.AssertProblemAsync(HttpStatusCode.BadRequest, "invalid-request");
        Assert.DoesNotContain("Bitbudget.", problem.GetProperty("detail").GetString(), StringComparison.Ordinal);
        return problem;
    }
}
