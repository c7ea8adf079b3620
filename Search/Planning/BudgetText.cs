using System.Globalization;
using System.Text.RegularExpressions;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Parses the one-line budget form used on the command line: <c>sqnr&gt;=30</c>, <c>top1&gt;=0.99</c>,
/// <c>kl&lt;=0.01</c>, <c>cosine&gt;=0.999</c>, <c>relative-mse&lt;=1e-3</c>, <c>accuracy-drop&lt;=0.5</c>,
/// <c>bytes&lt;=2500000</c>, <c>average-bits&lt;=4.5</c> (size budgets may add <c>,least=kl</c> to pick
/// the error they minimise).
/// </summary>
public static partial class BudgetText
{
    /// <summary>Parses <paramref name="text"/>; throws <see cref="EngineException"/> (budget-invalid) with an example of the right form.</summary>
    public static Budget Parse(string text)
    {
        var match = Form().Match(text.Replace(" ", string.Empty, StringComparison.Ordinal));
        if (!match.Success || !double.TryParse(match.Groups["value"].Value, NumberStyles.Float, CultureInfo.InvariantCulture, out var value))
        {
            throw Invalid(text);
        }

        var name = match.Groups["name"].Value.ToLowerInvariant();
        var op = match.Groups["op"].Value;
        var least = match.Groups["least"].Success ? MetricValues.Parse(match.Groups["least"].Value) : BudgetMetric.Sqnr;
        if (least is null)
        {
            throw Invalid(text);
        }

        switch (name)
        {
            case "bytes" when op == "<=":
                return new SizeBudget((long)value, null, least.Value);
            case "average-bits" or "avgbits" when op == "<=":
                return new SizeBudget(null, value, least.Value);
        }

        var metric = MetricValues.Parse(name) ?? throw Invalid(text);
        var wanted = AdditiveError.IsLowerBound(metric) ? ">=" : "<=";
        if (op != wanted)
        {
            throw new EngineException("budget-invalid", $"'{name}' is bounded with '{wanted}' (for example \"{name}{wanted}{Example(metric)}\"), not '{op}'.");
        }

        return new ErrorBudget(metric, value);
    }

    private static string Example(BudgetMetric metric) => metric switch
    {
        BudgetMetric.Sqnr => "30",
        BudgetMetric.Top1Agreement => "0.99",
        BudgetMetric.CosineSimilarity => "0.999",
        BudgetMetric.AccuracyDrop => "0.5",
        _ => "0.001",
    };

    private static EngineException Invalid(string text) => new(
        "budget-invalid",
        $"Cannot read the budget \"{text}\". Write a metric, a bound and a number, e.g. \"sqnr>=30\", \"top1>=0.99\", \"kl<=0.01\", \"accuracy-drop<=0.5\", \"bytes<=2500000\" or \"average-bits<=4.5\".");

    [GeneratedRegex(@"^(?<name>[A-Za-z0-9\-]+)(?<op><=|>=)(?<value>[-+0-9.eE]+)(,least=(?<least>[A-Za-z0-9\-]+))?$")]
    private static partial Regex Form();
}
